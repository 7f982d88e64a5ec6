"""A trial's score from its curve of per-epoch validation values.

``best_epoch``: the best epoch's value (a tie keeps the earlier epoch); ``last_epoch``: the
last epoch's; ``recent_mean``: the mean of the last ``recent`` epochs (fewer when the curve is
shorter). The score's epoch is the epoch a final fit should train for: the best epoch, or
the last one for the other two. Non-finite values (a diverged epoch) are never best and make
a mean non-finite.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass


@dataclass(frozen=True)
class Score:
    value: float
    epoch: int  # 1-based; 0 for an empty curve


def score_curve(values: Sequence[float], how: str, better: str, recent: int = 3) -> Score:
    """The score of ``values`` (epoch 1 first) by ``how``; ``better`` is "lower" or
    "higher"."""
    if not values:
        return Score(math.nan, 0)
    last = len(values)
    if how == "last_epoch":
        return Score(float(values[-1]), last)
    if how == "recent_mean":
        tail = values[-recent:]
        return Score(math.fsum(tail) / len(tail), last)
    if how != "best_epoch":
        raise ValueError(f"unknown score {how!r}")
    sign = 1.0 if better == "lower" else -1.0
    finite = [(sign * v, epoch) for epoch, v in enumerate(values, start=1) if math.isfinite(v)]
    if not finite:
        return Score(float(values[-1]), last)
    _, epoch = min(finite)  # the smallest signed value, then the earliest epoch
    return Score(float(values[epoch - 1]), epoch)
