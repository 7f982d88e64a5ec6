"""A task base that builds each split once and then serves it from memory."""

from __future__ import annotations

from abc import abstractmethod

import torch

from sweeper.tasks.base import SequenceSet, Split, Task


class CachedTask(Task):
    """Builds each split on first use; later calls return the same objects."""

    def __init__(self) -> None:
        self._cache: dict[str, SequenceSet] = {}

    def data(self, split: Split) -> SequenceSet:
        if split not in self.splits:
            raise ValueError(f"split must be one of {', '.join(self.splits)}, got {split!r}")
        if split not in self._cache:
            self._cache[split] = self._build(split)
        return self._cache[split]

    @abstractmethod
    def _build(self, split: Split) -> SequenceSet:
        """Make the sequences of one split (called at most once per split)."""


def generator(seed: int) -> torch.Generator:
    """A CPU generator of its own, so that task data never touches torch's global RNG."""
    return torch.Generator().manual_seed(seed)
