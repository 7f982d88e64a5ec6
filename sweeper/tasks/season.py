"""A season length suggested from the autocorrelation of a series' training rows."""

from __future__ import annotations

import numpy as np

MIN_PEAK = 0.3  # weaker autocorrelation is no evidence of a season (common practice)


def autocorrelation(y: np.ndarray, longest: int) -> np.ndarray:
    """Sample autocorrelation at lags 1..longest of ``y`` less its quadratic trend."""
    t = np.arange(len(y))
    rest = y - np.polyval(np.polyfit(t, y, 2), t)
    rest = rest - rest.mean()
    total = float(rest @ rest)
    if total == 0:
        return np.zeros(longest)
    return np.array([rest[:-k] @ rest[k:] for k in range(1, longest + 1)]) / total


def suggest_season(y: np.ndarray, longest: int = 400) -> int | None:
    """The lag of the first autocorrelation peak after the first negative value that reaches
    MIN_PEAK and 80% of the highest such peak; None when there is none. A season's lag is a
    peak once the short-lag correlation (neighbouring rows alike) has died away; the first
    strong one, because its multiples are peaks too."""
    top = min(longest, len(y) // 3)
    if top < 4:
        return None
    acf = autocorrelation(y, top)
    negative = np.flatnonzero(acf < 0)
    if not len(negative):
        return None
    peaks = [
        i
        for i in range(int(negative[0]) + 1, top - 1)
        if acf[i] >= acf[i - 1] and acf[i] >= acf[i + 1]
    ]
    if not peaks:
        return None
    highest = max(acf[i] for i in peaks)
    if highest < MIN_PEAK:
        return None
    return next(i for i in peaks if acf[i] >= 0.8 * highest) + 1
