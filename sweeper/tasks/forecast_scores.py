"""Series forecasts scored in the data's units, the trained model's and the baselines'.

On a held-out split every row is scored once, from the origin ``horizon`` rows before it
(SeriesTask.origins). Scores: MSE and MAE in the target's units (averaged over target
columns) and MASE, the MAE scaled by the in-sample MAE of the seasonal naive one-season-back
forecast on the training rows (Hyndman & Koehler 2006; Hyndman & Athanasopoulos, FPP 5.8),
or of the naive one-row-back forecast when the task has no season. MASE below 1 beats that
in-sample naive forecast.

``baseline_scores(task, split)`` is what ``check``, ``best --retrain`` and the saved model
show; it is plain data (``SplitBaselines``), computed from the task alone. The summary reads
``summary_baselines(task)`` (every held-out split) of the spec's task, and converts a
recorded scaled loss with ``data_mse`` where that is exact.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import torch

from sweeper.tasks import forecast_baselines as fb
from sweeper.tasks.season import suggest_season

if TYPE_CHECKING:
    from sweeper.tasks.base import Split
    from sweeper.tasks.series import SeriesTask

NAMES = ("persistence", "seasonal naive", "drift", "Holt-Winters")
INSTALL = "pip install 'sweeper[forecast]'"


@dataclass(frozen=True)
class Scores:
    mse: float
    mae: float
    mase: float

    def text(self) -> str:
        return f"MSE {self.mse:.5g}, MAE {self.mae:.5g}, MASE {self.mase:.4g}"

    def as_dict(self) -> dict[str, float]:
        return {"mse": self.mse, "mae": self.mae, "mase": self.mase}


@dataclass(frozen=True)
class SplitBaselines:
    """The baselines' scores on one split, in data units; ``missing`` says why one is not."""

    split: str
    rows: int
    season: int | None
    scores: dict[str, Scores]
    missing: dict[str, str] = field(default_factory=dict)

    def lines(self) -> list[str]:
        out = []
        for name in NAMES:
            if name in self.scores:
                out.append(f"{name}: {self.scores[name].text()}")
            else:
                out.append(f"{name}: not computed ({self.missing[name]})")
        return out

    def as_dict(self) -> dict[str, object]:
        return {
            "split": self.split,
            "rows": self.rows,
            "season": self.season,
            "scores": {name: s.as_dict() for name, s in self.scores.items()},
            "missing": dict(self.missing),
        }


def mase_scale(train: np.ndarray, m: int) -> np.ndarray:
    """Mean |y_t - y_{t-m}| over the training rows, per column."""
    return np.abs(train[m:] - train[:-m]).mean(axis=0)


def score(forecast: np.ndarray, actual: np.ndarray, scale: np.ndarray) -> Scores:
    errors = forecast - actual
    mase = float((np.abs(errors).mean(axis=0) / scale).mean())
    return Scores(float((errors**2).mean()), float(np.abs(errors).mean()), mase)


def _scale(task: SeriesTask) -> np.ndarray:
    return mase_scale(task.levels[: task.train_rows], task.season or 1)


def model_scores(task: SeriesTask, outputs: torch.Tensor, split: Split) -> Scores:
    """Scores of model outputs on ``task.data(split)``, in data units."""
    actual = task.levels[task.origins(split) + task.horizon]
    return score(task.forecast_levels(outputs, split), actual, _scale(task))


def baseline_scores(task: SeriesTask, split: Split) -> SplitBaselines:
    """Every baseline on exactly the rows and horizon the model is scored on (cached)."""
    cache = task.__dict__.setdefault("_baseline_scores", {})
    if split not in cache:
        cache[split] = _baseline_scores(task, split)
    result: SplitBaselines = cache[split]
    return result


def _baseline_scores(task: SeriesTask, split: Split) -> SplitBaselines:
    y, h, m = task.levels, task.horizon, task.season
    origins = task.origins(split)
    actual, scale = y[origins + h], _scale(task)
    forecasts: dict[str, np.ndarray] = {
        "persistence": fb.persistence(y, origins, h),
        "drift": fb.drift(y, origins, h),
    }
    missing: dict[str, str] = {}
    if m is None:
        missing["seasonal naive"] = missing["Holt-Winters"] = "set season"
    else:
        forecasts["seasonal naive"] = fb.seasonal_naive(y, origins, h, m)
        why = _holt_winters_missing(task, m)
        if why:
            missing["Holt-Winters"] = why
        else:
            with warnings.catch_warnings():  # statsmodels warns about its optimiser's exits
                warnings.simplefilter("ignore")
                forecasts["Holt-Winters"] = fb.holt_winters(y, task.train_rows, origins, h, m)
    scores = {name: score(f, actual, scale) for name, f in forecasts.items()}
    return SplitBaselines(split, len(origins), m, scores, missing)


def _holt_winters_missing(task: SeriesTask, m: int) -> str:
    if fb.statsmodels_missing():
        return f"statsmodels is not installed; {INSTALL}"
    if task.train_rows < 2 * m + 2:
        return f"it needs two seasons ({2 * m + 2} rows) of training rows"
    return ""


def is_forecast(task: object) -> bool:
    """A series task (data-unit scores apply), directly or under a refit."""
    return hasattr(task, "forecast_levels") and hasattr(task, "levels")


def comparison_lines(task: SeriesTask, outputs: torch.Tensor | None, split: Split) -> list[str]:
    """The model (when ``outputs`` is given) and every baseline on ``split``, data units."""
    baselines = baseline_scores(task, split)
    season = "no season set" if task.season is None else f"season {task.season}"
    lines = [f"data units, {baselines.rows} {split} rows, horizon {task.horizon}, {season}:"]
    if outputs is not None:
        lines.append(f"model: {model_scores(task, outputs, split).text()}")
    return lines + baselines.lines()


def check_lines(task: SeriesTask) -> list[str]:
    """What ``sweeper check`` adds for a series: the scoring, the season, the baselines."""
    options = task.options
    modelled = f"{options.predict}{' of the log' if options.log else ''}"
    lines = [
        f"predicts the {modelled} {task.horizon} row(s) ahead, fill {options.fill}; training "
        f"windows start every {task.stride} rows; held-out rows scored once each",
    ]
    if task.season is None:
        guess = suggest_season(task.levels[: task.train_rows, 0])
        hint = f"the autocorrelation suggests season = {guess}" if guess else "none is evident"
        lines.append(f"season not set ({hint}); seasonal naive and Holt-Winters need one")
    elif fb.statsmodels_missing():
        lines.append(f"Holt-Winters needs statsmodels: {INSTALL}")
    return lines + comparison_lines(task, None, "valid")


def data_mse(task: SeriesTask, scaled_mse: float) -> float | None:
    """A recorded scaled MSE (a trial's valid_loss) in data units, where that is exact: one
    target column and no log (a change forecast's error is then its level forecast's
    error). None otherwise; data-unit scores then need the model's outputs."""
    if task.options.log or task.output_size != 1:
        return None
    return float(scaled_mse * task.target_scaling.std[0] ** 2)


def summary_baselines(task: object) -> dict[str, SplitBaselines]:
    """For the summary: the baselines on each held-out split of a series task, by split
    name ("valid", and "test" where the task holds one out); empty for any other task."""
    if not is_forecast(task):
        return {}
    series: SeriesTask = task  # type: ignore[assignment]
    return {split: baseline_scores(series, split) for split in series.splits if split != "train"}
