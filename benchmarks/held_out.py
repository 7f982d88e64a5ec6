"""A task whose validation split is data no study saw: the benchmarks' "true quality"."""

from __future__ import annotations

import torch

from sweeper.tasks.base import Baseline, SequenceSet, Split, Task


class HeldOut(Task):
    """``task``'s training sequences, validated on ``held_out``."""

    def __init__(self, task: Task, held_out: SequenceSet) -> None:
        self.task, self._held_out = task, held_out
        self.name, self.kind, self.length = task.name, task.kind, task.length
        self.input_size, self.output_size = task.input_size, task.output_size
        self.metric_name = task.metric_name
        self.metric_higher_is_better = task.metric_higher_is_better

    def data(self, split: Split) -> SequenceSet:
        return self.task.data("train") if split == "train" else self._held_out

    def baseline(self) -> Baseline:
        return self.task.baseline()

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return self.task.metric(outputs, data)

    def describe(self) -> str:
        return self.task.describe()
