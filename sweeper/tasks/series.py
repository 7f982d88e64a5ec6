"""Forecast columns of a CSV file or an NPZ archive ``horizon`` steps ahead.

A CSV has a header row; in an NPZ archive each 1-D array is one column, named by its key.
Rows are split in time order: the first rows train, the next ``valid_fraction`` of them
validate, and the last ``test_fraction`` (none by default) are a held-out tail that sweeps
never read. Each column is standardised with the mean and (population) standard deviation of
the training rows only, so nothing about the later rows leaks into training. Windows of
``window`` steps never cross a split; the target at every step is the value ``horizon``
rows later. Loss, metric and baseline are all mean squared errors in these scaled units.
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
from sweeper.tasks.npz import NpzColumns, read_npz_columns
from sweeper.tasks.options import (
    OptionError,
    check_at_least,
    check_fraction,
    check_split_fractions,
    parse_options,
)
from sweeper.tasks.table import Table, read_table


@dataclass(frozen=True)
class SeriesOptions:
    file: str = ""
    columns: tuple[str, ...] | None = None  # inputs; all numeric columns when not given
    target: tuple[str, ...] | None = None  # columns to forecast; the inputs when not given
    horizon: int = 1
    window: int = 50  # steps per sequence
    stride: int | None = None  # rows between window starts; the window when not given
    valid_fraction: float = 0.2
    test_fraction: float = 0.0  # the held-out tail; 0 = none

    def __post_init__(self) -> None:
        for key in ("columns", "target"):
            if getattr(self, key) == ():
                raise OptionError(key, "must name at least one column (or leave it out)")
        check_at_least("horizon", self.horizon, 1)
        check_at_least("window", self.window, 1)
        if self.stride is not None:
            check_at_least("stride", self.stride, 1)
        check_fraction("valid_fraction", self.valid_fraction)
        check_split_fractions(self.valid_fraction, self.test_fraction)


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
        inputs = table.values(self.columns, source, "task.columns")
        targets = table.values(self.target, source, "task.target")
        self.test_rows = round(len(inputs) * options.test_fraction)
        self.valid_end = len(inputs) - self.test_rows
        self.train_rows = self.valid_end - round(len(inputs) * options.valid_fraction)
        self.splits = ("train", "valid", "test") if self.test_rows else ("train", "valid")
        self._check_split_sizes(source)
        train = slice(0, self.train_rows)
        self.input_scaling = fit_scaling(inputs[train], self.columns, source, "task.columns")
        self.target_scaling = fit_scaling(targets[train], self.target, source, "task.target")
        self._inputs = self.input_scaling.apply(inputs)
        self._targets = self.target_scaling.apply(targets)

    def _check_split_sizes(self, source: str) -> None:
        need = self.options.window + self.options.horizon
        names = {"train": "training", "valid": "validation", "test": "test"}
        for split in self.splits:
            first, end = self.rows(split)
            if end - first < need:
                raise SpecError(
                    source,
                    "task.window",
                    f"the {names[split]} part of {self.path.name} has {end - first} rows, but "
                    f"one window needs window + horizon = {need}; shorten window or change "
                    f"valid_fraction / test_fraction",
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
        """First row of each window of ``split``; windows and their targets stay inside it."""
        first, end = self.rows(split)
        last = end - self.options.window - self.options.horizon
        return range(first, last + 1, self.stride)

    def _build(self, split: Split) -> SequenceSet:
        window, horizon = self.options.window, self.options.horizon
        starts = self.starts(split)
        inputs = np.stack([self._inputs[s : s + window] for s in starts])
        targets = np.stack([self._targets[s + horizon : s + horizon + window] for s in starts])
        weights = torch.ones(len(starts), window)
        return SequenceSet(_tensor(inputs), _tensor(targets), weights)

    def persistence(self, split: Split) -> torch.Tensor:
        """The last-value forecast: each target column's current (scaled) value."""
        window = self.options.window
        return _tensor(np.stack([self._targets[s : s + window] for s in self.starts(split)]))

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
