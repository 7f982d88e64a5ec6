"""What one epoch of a trial leaves behind: its record and its gradient-norm statistics.

Pure values, no storage: ``sweeper.store.epoch_rows`` writes them to the study database.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np


@dataclass(frozen=True)
class GradientStats:
    """Statistics of the pre-clip global gradient norms of one epoch's optimizer steps."""

    mean: float
    median: float
    p95: float
    max: float
    clip_fraction: float  # share of steps whose norm reached the clip threshold
    nonfinite_steps: int
    steps: int


@dataclass(frozen=True)
class EpochRecord:
    """What is recorded after every epoch of every trial (epochs count from 1)."""

    epoch: int
    train_loss: float
    valid_loss: float
    valid_metric: float
    grad_norm_mean: float
    grad_norm_median: float
    grad_norm_p95: float
    grad_norm_max: float
    clip_fraction: float
    nonfinite_steps: int
    steps: int
    seconds: float
    sequences_per_second: float

    def as_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


EPOCH_FIELDS = tuple(field.name for field in dataclasses.fields(EpochRecord))


def summarize_norms(norms: Sequence[float], clip: float) -> GradientStats:
    """Summarise one epoch of pre-clip norms; non-finite norms are counted, not averaged.

    A step counts as clipped when its norm is at or above the threshold (Pascanu et al. 2013,
    Algorithm 1 rescales when ||g|| >= threshold); ``clip = 0`` means clipping is off.
    """
    values = np.asarray(norms, dtype=np.float64)
    finite = values[np.isfinite(values)]
    nonfinite = int(values.size - finite.size)
    if finite.size == 0:
        nan = math.nan
        return GradientStats(nan, nan, nan, nan, 0.0, nonfinite, int(values.size))
    clipped = float(np.mean(finite >= clip)) if clip > 0 else 0.0
    return GradientStats(
        mean=float(finite.mean()),
        median=float(np.median(finite)),
        p95=float(np.percentile(finite, 95)),
        max=float(finite.max()),
        clip_fraction=clipped,
        nonfinite_steps=nonfinite,
        steps=int(values.size),
    )
