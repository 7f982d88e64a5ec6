"""Classical forecasts a trained series model should beat, each from rolling origins.

Every function takes the level series ``y`` [rows, columns] in data units, the forecast
origins (rows a forecast is made at, using rows 0..t only) and the horizon h, and returns
one forecast of row t + h per origin [origins, columns]. Definitions follow Hyndman &
Athanasopoulos, Forecasting: Principles and Practice (3rd ed.), section 5.2 and 8.3.
"""

from __future__ import annotations

import importlib.util
from dataclasses import dataclass
from typing import Any

import numpy as np


def persistence(y: np.ndarray, origins: np.ndarray, h: int) -> np.ndarray:
    """Naive: y_t."""
    return y[origins]


def seasonal_naive(y: np.ndarray, origins: np.ndarray, h: int, m: int) -> np.ndarray:
    """y_{t + h - m(k + 1)} with k = floor((h - 1) / m): the last observed same season."""
    return y[origins + h - m * ((h - 1) // m + 1)]


def drift(y: np.ndarray, origins: np.ndarray, h: int) -> np.ndarray:
    """y_t + h (y_t - y_0) / t: the line through the first and the last observation."""
    t = origins[:, None].astype(float)
    return y[origins] + h * (y[origins] - y[0]) / t


def statsmodels_missing() -> bool:
    """Whether the optional statsmodels is absent (looked up without importing it)."""
    return importlib.util.find_spec("statsmodels") is None


@dataclass(frozen=True)
class HoltWinters:
    """Additive trend and season, smoothing weights and initial states fitted by statsmodels.

    Recursions (FPP 8.3; statsmodels' ExponentialSmoothing, trend="add", seasonal="add"):
      l_t = a (y_t - s_{t-m}) + (1 - a)(l_{t-1} + b_{t-1})
      b_t = b* (l_t - l_{t-1}) + (1 - b*) b_{t-1}
      s_t = g (y_t - l_{t-1} - b_{t-1}) + (1 - g) s_{t-m}
      forecast of y_{t+h} = l_t + h b_t + s_{t + h - m(k + 1)}
    """

    alpha: float
    beta: float
    gamma: float
    level: float  # l_{-1}
    trend: float  # b_{-1}
    seasons: np.ndarray  # s_{-m} .. s_{-1}

    @property
    def m(self) -> int:
        return len(self.seasons)

    def states(self, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Level, trend and season after each row of ``y`` [rows] (fixed weights, no refit)."""
        n, m = len(y), self.m
        level, trend = np.empty(n), np.empty(n)
        season = np.concatenate([self.seasons, np.empty(n)])  # season[i + m] is s_i
        l_prev, b_prev = self.level, self.trend
        for i in range(n):
            s_back = season[i]
            level[i] = self.alpha * (y[i] - s_back) + (1 - self.alpha) * (l_prev + b_prev)
            trend[i] = self.beta * (level[i] - l_prev) + (1 - self.beta) * b_prev
            season[i + m] = self.gamma * (y[i] - l_prev - b_prev) + (1 - self.gamma) * s_back
            l_prev, b_prev = level[i], trend[i]
        return level, trend, season

    def one_step(self, y: np.ndarray) -> np.ndarray:
        """The in-sample one-step forecasts l_{t-1} + b_{t-1} + s_{t-m} of each row."""
        level, trend, season = self.states(y)
        before_l = np.concatenate([[self.level], level[:-1]])
        before_b = np.concatenate([[self.trend], trend[:-1]])
        return before_l + before_b + season[: len(y)]

    def forecast(self, y: np.ndarray, origins: np.ndarray, h: int) -> np.ndarray:
        level, trend, season = self.states(y[: origins.max() + 1])
        back = origins + h - self.m * ((h - 1) // self.m + 1)
        return level[origins] + h * trend[origins] + season[back + self.m]


def fit_holt_winters(y: np.ndarray, m: int) -> HoltWinters:
    """Fit on the training rows ``y`` [rows] of one column (statsmodels' default estimator)."""
    from statsmodels.tsa.holtwinters import ExponentialSmoothing

    fit = ExponentialSmoothing(
        y, trend="add", seasonal="add", seasonal_periods=m, initialization_method="estimated"
    ).fit()
    return from_params(fit.params)


def from_params(p: dict[str, Any]) -> HoltWinters:
    """The model of a statsmodels fit's ``params``."""
    return HoltWinters(
        float(p["smoothing_level"]),
        float(p["smoothing_trend"]),
        float(p["smoothing_seasonal"]),
        float(p["initial_level"]),
        float(p["initial_trend"]),
        np.asarray(p["initial_seasons"], dtype=float),
    )


def holt_winters(y: np.ndarray, train_rows: int, origins: np.ndarray, h: int, m: int) -> np.ndarray:
    """Holt-Winters fitted per column on the training rows, run forward without refitting."""
    columns = []
    for c in range(y.shape[1]):
        model = fit_holt_winters(y[:train_rows, c], m)
        columns.append(model.forecast(y[:, c], origins, h))
    return np.column_stack(columns)
