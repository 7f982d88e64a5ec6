"""Forecast columns of a CSV file or an NPZ archive ``horizon`` steps ahead.

A CSV has a header row; in an NPZ archive each 1-D array is one column, named by its key.
Rows are split in time order: the first rows train, the next ``valid_fraction`` of them
validate, and the last ``test_fraction`` (none by default) are a held-out tail that sweeps
never read. Each column is standardised with the mean and (population) standard deviation of
the training rows only, so nothing about the later rows leaks into training.

The model reads one row per step and at each step forecasts the target ``horizon`` rows
later: its level, or (``predict = "change"``) its change since the current row, of the
logarithm with ``log`` (see series_transform). Training windows of ``window`` rows start
every ``stride`` rows (the window by default) and their targets stay inside the training
rows. Validation and test rows are scored once each, rolling origin: sequence after sequence
of ``window`` rows, each scoring up to half a window of consecutive forecasts after warming
the state on the rows before them (rows of an earlier split are read as inputs only), so
that every held-out row is the target of exactly one scored step. Loss, metric and baseline
are mean squared errors in scaled units; forecast_scores gives scores in data units.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch

from sweeper.errors import SpecError
from sweeper.tasks import metrics
from sweeper.tasks.base import Baseline, SequenceSet, Split
from sweeper.tasks.cached import CachedTask
from sweeper.tasks.files import resolve
from sweeper.tasks.fill import FILLS, fill_missing
from sweeper.tasks.npz import NpzColumns, read_npz_columns
from sweeper.tasks.options import (
    OptionError,
    check_at_least,
    check_fraction,
    check_split_fractions,
    parse_options,
)
from sweeper.tasks.series_transform import PREDICTS, Transform, check_positive
from sweeper.tasks.table import Table, read_table


@dataclass(frozen=True)
class SeriesOptions:
    file: str = ""
    columns: tuple[str, ...] | None = None  # inputs; all numeric columns when not given
    target: tuple[str, ...] | None = None  # columns to forecast; the inputs when not given
    horizon: int = 1
    window: int = 50  # steps per sequence
    stride: int | None = None  # rows between training window starts; the window when not given
    valid_fraction: float = 0.2
    test_fraction: float = 0.0  # the held-out tail; 0 = none
    predict: str = "level"  # or "change": the change over the horizon, added back to the level
    log: bool = False  # model the logarithm of the target (a positive series)
    season: int | None = None  # rows per season, for seasonal naive, Holt-Winters and MASE
    fill: str = "none"  # missing cells: "none" (refuse), "previous" or "linear"

    def __post_init__(self) -> None:
        for key in ("columns", "target"):
            if getattr(self, key) == ():
                raise OptionError(key, "must name at least one column (or leave it out)")
        check_at_least("horizon", self.horizon, 1)
        check_at_least("window", self.window, 1)
        if self.stride is not None:
            check_at_least("stride", self.stride, 1)
        if self.season is not None:
            check_at_least("season", self.season, 2)
        check_fraction("valid_fraction", self.valid_fraction)
        check_split_fractions(self.valid_fraction, self.test_fraction)
        check_choice("predict", self.predict, PREDICTS)
        check_choice("fill", self.fill, FILLS)


def check_choice(key: str, value: str, choices: tuple[str, ...]) -> None:
    if value not in choices:
        names = " or ".join(repr(choice) for choice in choices)
        raise OptionError(key, f"must be {names}, got {value!r}")


@dataclass(frozen=True, eq=False)
class Scaling:
    """Per-column standardisation fitted on the training rows."""

    mean: np.ndarray
    std: np.ndarray

    def apply(self, values: np.ndarray) -> np.ndarray:
        return (values - self.mean) / self.std

    def invert(self, values: np.ndarray) -> np.ndarray:
        return values * self.std + self.mean


def fit_scaling(values: np.ndarray, names: tuple[str, ...], source: str, key: str) -> Scaling:
    mean, std = values.mean(axis=0), values.std(axis=0)
    for name, spread in zip(names, std, strict=True):
        if spread == 0:
            raise SpecError(
                source,
                key,
                f"column {name!r} is constant over the training rows; leave it out",
            )
    return Scaling(mean, std)


class SeriesTask(CachedTask):
    name = "series"
    kind = "regression"
    metric_name = "mse_scaled"
    metric_higher_is_better = False

    def __init__(self, options: SeriesOptions, base_dir: Path, source: str) -> None:
        super().__init__()
        self.options = options
        self.path = resolve(options.file, base_dir, source)
        table = read_columns(self.path, source)
        self.columns = options.columns or _default_columns(table, source)
        self.target = options.target or self.columns
        self.length = options.window
        self.input_size, self.output_size = len(self.columns), len(self.target)
        self.stride = options.stride or options.window
        self.season = options.season
        self.transform = Transform(options.predict, options.log, options.horizon)
        raw_inputs = self._values(table, self.columns, source, "task.columns")
        self.levels = self._values(table, self.target, source, "task.target")  # data units
        self.test_rows = round(len(raw_inputs) * options.test_fraction)
        self.valid_end = len(raw_inputs) - self.test_rows
        self.train_rows = self.valid_end - round(len(raw_inputs) * options.valid_fraction)
        self.splits = ("train", "valid", "test") if self.test_rows else ("train", "valid")
        self._check_split_sizes(source)
        self._check_targets_are_inputs(source)
        if options.log:
            check_positive(self.levels, self.target, source)
        self.z = self.transform.to_model(self.levels)
        inputs = self._model_inputs(raw_inputs)
        goals = self.transform.goals(self.z)
        train = slice(0, self.train_rows)
        self.input_scaling = fit_scaling(inputs[train], self.columns, source, "task.columns")
        fitted_on = self.z[train] if options.predict == "level" else goals[train][: -self.horizon]
        self.target_scaling = fit_scaling(fitted_on, self.target, source, "task.target")
        self._inputs = self.input_scaling.apply(inputs)
        self._targets = self.target_scaling.apply(goals)

    @property
    def horizon(self) -> int:
        return self.options.horizon

    def _values(self, table: Table | NpzColumns, names: tuple[str, ...], source: str, key: str):
        fill = self.options.fill
        values = table.values(names, source, key, missing=fill != "none")
        return values if fill == "none" else fill_missing(values, fill, names, source)

    def _model_inputs(self, raw_inputs: np.ndarray) -> np.ndarray:
        """Input columns as the model reads them: a target column as the target is modelled
        (its log, its change), any other column as it is."""
        out = raw_inputs.copy()
        for c, name in enumerate(self.columns):
            if name in self.target:
                out[:, c] = self.transform.inputs(self.z[:, self.target.index(name)])
        return out

    def _check_targets_are_inputs(self, source: str) -> None:
        """Adding a change back (and a saved model's forecast) needs each target's level."""
        absent = [name for name in self.target if name not in self.columns]
        if absent and (self.options.predict == "change" or self.options.log):
            raise SpecError(
                source,
                "task.target",
                f"{', '.join(map(repr, absent))} must also be among columns when forecasting "
                "the change or the log; add it to columns",
            )

    def _check_split_sizes(self, source: str) -> None:
        need = self.options.window + self.options.horizon
        if self.train_rows < need:
            raise SpecError(
                source,
                "task.window",
                f"the training part of {self.path.name} has {self.train_rows} rows, but one "
                f"window needs window + horizon = {need}; shorten window or change "
                "valid_fraction / test_fraction",
            )
        first, end = self.rows("valid")
        if end <= first:
            raise SpecError(
                source,
                "task.valid_fraction",
                f"it leaves no validation row of the {end} in {self.path.name}; raise it",
            )

    def rows(self, split: Split) -> tuple[int, int]:
        """First row and end row (exclusive) of ``split``."""
        bounds = {
            "train": (0, self.train_rows),
            "valid": (self.train_rows, self.valid_end),
            "test": (self.valid_end, self.valid_end + self.test_rows),
        }
        return bounds[split]

    def starts(self, split: Split) -> range:
        """First row of each training window; windows and their targets stay in ``split``."""
        first, end = self.rows(split)
        last = end - self.options.window - self.options.horizon
        return range(first, last + 1, self.stride)

    def origins(self, split: Split) -> np.ndarray:
        """The forecast origins scored on a held-out split: one per row, horizon rows back."""
        first, end = self.rows(split)
        return np.arange(first - self.horizon, end - self.horizon)

    def sequence_rows(self, split: Split) -> tuple[np.ndarray, np.ndarray]:
        """The origin row of each step [N, window], and which steps are scored [N, window]."""
        window = self.options.window
        if split == "train":
            rows = np.stack([np.arange(s, s + window) for s in self.starts(split)])
            return rows, np.ones(rows.shape, dtype=bool)
        origins = self.origins(split)
        scored = max(1, window // 2)
        ends = [
            min(a + scored, origins[-1] + 1) for a in range(origins[0], origins[-1] + 1, scored)
        ]
        rows = np.stack([np.arange(end - window, end) for end in ends])
        counts = np.diff([origins[0], *ends])
        mask = np.arange(window)[None, :] >= window - counts[:, None]
        return rows, mask

    def _build(self, split: Split) -> SequenceSet:
        rows, scored = self.sequence_rows(split)
        weights = torch.from_numpy(scored.astype(np.float32))
        return SequenceSet(_tensor(self._inputs[rows]), _tensor(self._targets[rows]), weights)

    def persistence(self, split: Split) -> torch.Tensor:
        """The last-value forecast at every step, as the model's scaled goal."""
        rows, _ = self.sequence_rows(split)
        goal = self.transform.persistence_goal(self.z[rows])
        return _tensor(self.target_scaling.apply(goal))

    def forecast_levels(self, outputs: torch.Tensor, split: Split) -> np.ndarray:
        """Model outputs on ``data(split)`` as forecasts in data units [origins, target],
        one per scored step, in the order of ``origins(split)``."""
        rows, scored = self.sequence_rows(split)
        goal = self.target_scaling.invert(outputs.detach().double().numpy()[scored])
        return self.transform.levels(goal, self.z[rows[scored]])

    def baseline(self) -> Baseline:
        return self.baseline_on("valid")

    def baseline_on(self, split: Split) -> Baseline:
        """The persistence forecast's MSE on ``split`` (the sweep's baseline is on "valid")."""
        value = metrics.mse(self.persistence(split), self.data(split))
        return Baseline(
            value,
            "valid_loss",
            f"MSE {value:.4f} (scaled units) of the persistence forecast, which predicts "
            f"that each column {self.options.horizon} step(s) ahead equals its current value",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        """MSE in scaled units (each target column standardised on the training rows)."""
        return metrics.mse(outputs, data)


def read_columns(path: Path, source: str) -> Table | NpzColumns:
    """An NPZ archive by its suffix; anything else is read as CSV."""
    if path.suffix.lower() == ".npz":
        return read_npz_columns(path, source)
    return read_table(path, source)


def _default_columns(table: Table | NpzColumns, source: str) -> tuple[str, ...]:
    numeric = table.numeric_columns()
    if not numeric:
        raise SpecError(
            source,
            "task.columns",
            f"{table.path.name} has no numeric column; columns: {', '.join(table.columns)}",
        )
    return numeric


def _tensor(values: np.ndarray) -> torch.Tensor:
    return torch.from_numpy(values).float()


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> SeriesTask:
    return SeriesTask(parse_options(SeriesOptions, options, source, "series"), base_dir, source)
