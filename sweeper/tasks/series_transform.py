"""What a series model is asked to predict: the level ``horizon`` rows ahead, or its change.

A series with a trend leaves its training range; a network fed levels then forecasts with a
bias. Forecasting the change over the horizon (optionally of the logarithm, for a positive
series) keeps inputs and targets in the range training saw; the forecast level is the last
observed level plus the predicted change, so scores and saved-model outputs stay in the
target's own units.

Per forecast origin t (the row a forecast is made at), the goal is
  level:  z[t + horizon]
  change: z[t + horizon] - z[t]
where z is the target column, or its natural logarithm with ``log``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sweeper.errors import SpecError

PREDICTS = ("level", "change")


@dataclass(frozen=True)
class Transform:
    predict: str  # one of PREDICTS
    log: bool
    horizon: int

    def to_model(self, levels: np.ndarray) -> np.ndarray:
        """Levels in the model's own units (their logarithm with ``log``)."""
        return np.log(levels) if self.log else levels

    def from_model(self, values: np.ndarray) -> np.ndarray:
        return np.exp(values) if self.log else values

    def goals(self, z: np.ndarray) -> np.ndarray:
        """The goal at every origin row; NaN at the last ``horizon`` rows (nothing to reach)."""
        out = np.full_like(z, np.nan)
        ahead = z[self.horizon :]
        out[: len(ahead)] = ahead - z[: len(ahead)] if self.predict == "change" else ahead
        return out

    def levels(self, goal: np.ndarray, z_origin: np.ndarray) -> np.ndarray:
        """Forecast levels in data units from predicted goals and the levels at the origins."""
        return self.from_model(z_origin + goal if self.predict == "change" else goal)

    def persistence_goal(self, z_origin: np.ndarray) -> np.ndarray:
        """The goal that forecasts the level at the origin: no change."""
        return np.zeros_like(z_origin) if self.predict == "change" else z_origin

    def inputs(self, z: np.ndarray) -> np.ndarray:
        """A target column as a model input: its level, or, forecasting the change, its change
        since the row before (the first row, with no row before, gets the second row's)."""
        if self.predict != "change":
            return z
        steps = np.diff(z, axis=0)
        return np.concatenate([steps[:1], steps])


def check_positive(values: np.ndarray, names: tuple[str, ...], source: str) -> None:
    """``log`` needs every value above 0; name the first column and row that is not."""
    for c, name in enumerate(names):
        bad = np.flatnonzero(values[:, c] <= 0)
        if len(bad):
            raise SpecError(
                source,
                "task.log",
                f"column {name!r} has {float(values[bad[0], c])!r} at row {bad[0] + 1}; a log "
                "transform needs every value above 0 (set log = false)",
            )
