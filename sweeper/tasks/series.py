"""Forecast columns of a CSV file ``horizon`` steps ahead.

Rows are split in time order: the first rows train, the last ``valid_fraction`` of them
validate. Each column is standardised with the mean and (population) standard deviation of
the training rows only, so nothing about the validation rows leaks into training. Windows of
``window`` steps never cross the split; the target at every step is the value ``horizon``
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
from sweeper.tasks.options import (
    OptionError,
    check_at_least,
    check_fraction,
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

    def __post_init__(self) -> None:
        for key in ("columns", "target"):
            if getattr(self, key) == ():
                raise OptionError(key, "must name at least one column (or leave it out)")
        check_at_least("horizon", self.horizon, 1)
        check_at_least("window", self.window, 1)
        if self.stride is not None:
            check_at_least("stride", self.stride, 1)
        check_fraction("valid_fraction", self.valid_fraction)


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
        table = read_table(self.path, source)
        self.columns = options.columns or _default_columns(table, source)
        self.target = options.target or self.columns
        self.length = options.window
        self.input_size, self.output_size = len(self.columns), len(self.target)
        self.stride = options.stride or options.window
        inputs = table.values(self.columns, source, "task.columns")
        targets = table.values(self.target, source, "task.target")
        self.train_rows = len(inputs) - round(len(inputs) * options.valid_fraction)
        self._check_split_sizes(len(inputs), source)
        train = slice(0, self.train_rows)
        self.input_scaling = fit_scaling(inputs[train], self.columns, source, "task.columns")
        self.target_scaling = fit_scaling(targets[train], self.target, source, "task.target")
        self._inputs = self.input_scaling.apply(inputs)
        self._targets = self.target_scaling.apply(targets)

    def _check_split_sizes(self, total: int, source: str) -> None:
        need = self.options.window + self.options.horizon
        for part, rows in (("training", self.train_rows), ("validation", total - self.train_rows)):
            if rows < need:
                raise SpecError(
                    source,
                    "task.window",
                    f"the {part} part of {self.path.name} has {rows} rows, but one window "
                    f"needs window + horizon = {need}; shorten window or change valid_fraction",
                )

    def starts(self, split: Split) -> range:
        """First row of each window of ``split``; windows and their targets stay inside it."""
        first, end = (0, self.train_rows) if split == "train" else (self.train_rows, None)
        end = len(self._inputs) if end is None else end
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
        value = metrics.mse(self.persistence("valid"), self.data("valid"))
        return Baseline(
            value,
            "valid_loss",
            f"MSE {value:.4f} (scaled units) of the persistence forecast, which predicts "
            f"that each column {self.options.horizon} step(s) ahead equals its current value",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        """MSE in scaled units (each target column standardised on the training rows)."""
        return metrics.mse(outputs, data)


def _default_columns(table: Table, source: str) -> tuple[str, ...]:
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
