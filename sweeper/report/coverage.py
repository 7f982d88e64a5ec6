"""Where a trial's value lies within its searched range."""

from __future__ import annotations

import math
from typing import Any

from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution

EDGE = 0.05  # within 5% of a numeric range's end counts as at the edge (common practice)


def range_position(dist: Any, value: Any) -> float:
    """0 at the range's low end, 1 at its high end (log ranges on a log scale); NaN if unknown."""
    if isinstance(dist, CategoricalDistribution):
        choices = list(dist.choices)
        if value not in choices:
            return math.nan
        return choices.index(value) / max(len(choices) - 1, 1)
    if isinstance(dist, (FloatDistribution, IntDistribution)) and dist.high > dist.low:
        low, high, x = float(dist.low), float(dist.high), float(value)
        if dist.log:
            low, high, x = math.log(low), math.log(high), math.log(x)
        return (x - low) / (high - low)
    return math.nan


def at_edge(dist: Any, value: Any) -> str | None:
    """ "low" or "high" when a numeric value sits at an end of its range, else None."""
    if isinstance(dist, CategoricalDistribution):
        return None
    where = range_position(dist, value)
    if not math.isfinite(where):
        return None
    if where <= EDGE:
        return "low"
    return "high" if where >= 1 - EDGE else None
