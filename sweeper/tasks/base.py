"""What every sequence task provides to the trainer and to the summary."""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import Literal

import torch

Kind = Literal["regression", "classification"]
Split = Literal["train", "valid", "test"]


@dataclass(frozen=True)
class SequenceSet:
    """A batch-first set of sequences.

    inputs:  [N, T, F] float32
    targets: [N, T] int64 class indices (classification) or [N, T, O] float32 (regression)
    weights: [N, T] float32 per-step loss weights; 0 where a step has no target
    extras:  task-specific tensors aligned with the sequences (e.g. legal-successor masks)
    """

    inputs: torch.Tensor
    targets: torch.Tensor
    weights: torch.Tensor
    extras: dict[str, torch.Tensor] = field(default_factory=dict)

    def __len__(self) -> int:
        return int(self.inputs.shape[0])

    def subset(self, index: torch.Tensor) -> SequenceSet:
        return SequenceSet(
            self.inputs[index],
            self.targets[index],
            self.weights[index],
            {key: value[index] for key, value in self.extras.items()},
        )


@dataclass(frozen=True)
class Baseline:
    """The score of a trivial strategy that a trained model must beat.

    measure: which recorded value it is comparable with ("valid_loss" or "valid_metric").
    """

    value: float
    measure: Literal["valid_loss", "valid_metric"]
    description: str


class Task(ABC):
    """A sequence task: data, loss kind, metric and baseline.

    Data depends only on the task's own options and seed, never on the trial, so that every
    trial of a study sees the same sequences. A task whose data has a held-out "test" split
    lists it in ``splits``; sweeps never read it.
    """

    name: str
    kind: Kind
    input_size: int
    output_size: int
    length: int  # steps per sequence; the longest useful unroll
    metric_name: str
    metric_higher_is_better: bool
    splits: tuple[Split, ...] = ("train", "valid")

    @abstractmethod
    def data(self, split: Split) -> SequenceSet:
        """The sequences of one of ``splits`` (cached after the first call)."""

    @abstractmethod
    def baseline(self) -> Baseline:
        """The trivial strategy's score on the validation split."""

    @abstractmethod
    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        """Task metric of model outputs [N, T, O] (logits or predictions) on ``data``."""

    def describe(self) -> str:
        return f"{self.name} ({self.kind}, {self.length} steps)"
