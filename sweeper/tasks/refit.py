"""A task's training and validation sequences joined, for the final fit of a chosen config.

Its "valid" split is the task's held-out "test" split when it has one; otherwise the
validation split again (which the final fit has then also trained on).
"""

from __future__ import annotations

import torch

from sweeper.errors import InputError
from sweeper.tasks.base import Baseline, SequenceSet, Split, Task


def join(first: SequenceSet, second: SequenceSet) -> SequenceSet:
    """``first`` then ``second``; extras are kept when both splits have them."""
    if first.inputs.shape[1:] != second.inputs.shape[1:]:
        raise InputError(
            f"the training sequences {tuple(first.inputs.shape[1:])} and the validation "
            f"sequences {tuple(second.inputs.shape[1:])} differ in shape; they cannot be joined"
        )
    extras = {
        key: torch.cat([value, second.extras[key]])
        for key, value in first.extras.items()
        if key in second.extras and value.shape[1:] == second.extras[key].shape[1:]
    }
    return SequenceSet(
        torch.cat([first.inputs, second.inputs]),
        torch.cat([first.targets, second.targets]),
        torch.cat([first.weights, second.weights]),
        extras,
    )


class RefitTask(Task):
    """``task`` with train = train + valid and valid = the held-out split."""

    def __init__(self, task: Task) -> None:
        self.task = task
        self.name, self.kind, self.length = task.name, task.kind, task.length
        self.input_size, self.output_size = task.input_size, task.output_size
        self.metric_name = task.metric_name
        self.metric_higher_is_better = task.metric_higher_is_better
        self.held_out: Split = "test" if "test" in task.splits else "valid"
        self._train: SequenceSet | None = None

    def data(self, split: Split) -> SequenceSet:
        if split == "train":
            if self._train is None:
                self._train = join(self.task.data("train"), self.task.data("valid"))
            return self._train
        if split == "valid":
            return self.task.data(self.held_out)
        raise ValueError(f"a refit task has train and valid splits only, got {split!r}")

    def baseline(self) -> Baseline:
        on = getattr(self.task, "baseline_on", None)
        return on(self.held_out) if callable(on) else self.task.baseline()

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return self.task.metric(outputs, data)

    def describe(self) -> str:
        return self.task.describe()
