"""Labelled sequences from an NPZ archive: classify whole sequences or label every step.

The archive holds ``inputs`` [N, T, F] and ``labels``: [N] (one class per sequence, scored at
its last real step) or [N, T] (one class per step). An optional ``lengths`` array [N] gives
each sequence's real steps; the steps after them are padding, with loss weight 0 and inputs
set to 0 (their labels and values are never read). Sequences are split into train, valid and
test (a held-out part that sweeps never read) by a seeded shuffle, or in file order. Each input
feature is standardised on the training sequences' real steps.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch

from sweeper.errors import SpecError
from sweeper.seeds import derive_seed
from sweeper.tasks import metrics
from sweeper.tasks.base import Baseline, SequenceSet, Split
from sweeper.tasks.cached import CachedTask, generator
from sweeper.tasks.files import resolve
from sweeper.tasks.npz import first_nonfinite, read_npz, require
from sweeper.tasks.options import (
    check_at_least,
    check_fraction,
    check_split_fractions,
    parse_options,
)
from sweeper.tasks.series import Scaling


@dataclass(frozen=True)
class SequencesOptions:
    file: str = ""
    inputs: str = "inputs"  # array [N, T, F]
    labels: str = "labels"  # array [N] or [N, T] of class indices
    lengths: str | None = None  # array [N] of real steps; every step is real when not given
    classes: int | None = None  # labels lie in [0, classes); the largest label + 1 by default
    valid_fraction: float = 0.2
    test_fraction: float = 0.0
    shuffle: bool = True  # split a seeded shuffle of the sequences, not the file order
    seed: int = 0
    scale: bool = True  # standardise each feature on the training sequences

    def __post_init__(self) -> None:
        if self.classes is not None:
            check_at_least("classes", self.classes, 2)
        check_fraction("valid_fraction", self.valid_fraction)
        check_split_fractions(self.valid_fraction, self.test_fraction)


@dataclass(frozen=True)
class _Arrays:
    inputs: np.ndarray  # float64 [N, T, F]
    labels: np.ndarray  # int64 [N] or [N, T]; 0 at padding
    mask: np.ndarray  # bool [N, T]: real steps
    lengths: np.ndarray  # int64 [N]


class SequencesTask(CachedTask):
    name = "sequences"
    kind = "classification"
    metric_name = "accuracy"
    metric_higher_is_better = True

    def __init__(self, options: SequencesOptions, base_dir: Path, source: str) -> None:
        super().__init__()
        self.options = options
        self.path = resolve(options.file, base_dir, source)
        arrays = _ArrayReader(self.path, options, source).read()
        count, self.length, self.input_size = arrays.inputs.shape
        self.per_step = arrays.labels.ndim == 2
        self.output_size = _classes(arrays, options, self.path, source)
        self.index = _split_index(count, options, self.path, source)
        self.splits = ("train", "valid", "test") if options.test_fraction else ("train", "valid")
        train = self.index["train"]
        self.input_scaling = _fit(arrays.inputs[train], arrays.mask[train], options.scale)
        self._arrays = arrays

    def _build(self, split: Split) -> SequenceSet:
        arrays, rows = self._arrays, self.index[split]
        mask = arrays.mask[rows]
        inputs = np.where(mask[..., None], self.input_scaling.apply(arrays.inputs[rows]), 0.0)
        if self.per_step:
            targets, weights = arrays.labels[rows], mask.astype(np.float32)
        else:
            targets = np.repeat(arrays.labels[rows][:, None], self.length, axis=1)
            weights = np.zeros(mask.shape, dtype=np.float32)
            weights[np.arange(len(rows)), arrays.lengths[rows] - 1] = 1.0
        return SequenceSet(
            torch.from_numpy(inputs).float(),
            torch.from_numpy(targets).long(),
            torch.from_numpy(weights),
        )

    def commonest_class(self) -> int:
        """The most frequent class among the training targets (ties: the smallest)."""
        data = self.data("train")
        counts = Counter(data.targets[data.weights > 0].tolist())
        return min(counts, key=lambda label: (-counts[label], label))

    def baseline(self) -> Baseline:
        return self.baseline_on("valid")

    def baseline_on(self, split: Split) -> Baseline:
        """Accuracy on ``split`` of always answering the commonest training class."""
        data, label = self.data(split), self.commonest_class()
        value = metrics.weighted_mean((data.targets == label).float(), data.weights)
        return Baseline(
            value,
            "valid_metric",
            f"accuracy {value:.4f} of always answering class {label}, the commonest in training",
        )

    def metric(self, outputs: torch.Tensor, data: SequenceSet) -> float:
        return metrics.accuracy(outputs, data)

    def describe(self) -> str:
        what = "labelling every step" if self.per_step else "one class per sequence"
        return f"{self.name} ({what}, {self.output_size} classes, {self.length} steps)"


class _ArrayReader:
    """Reads and checks the archive's arrays; every problem names the file and the key."""

    def __init__(self, path: Path, options: SequencesOptions, source: str) -> None:
        self.path, self.options, self.source = path, options, source
        self.arrays = read_npz(path, source)

    def fail(self, key: str, message: str) -> SpecError:
        return SpecError(self.source, f"task.{key}", f"{self.path.name}: {message}")

    def read(self) -> _Arrays:
        inputs = self._inputs()
        lengths = self._lengths(inputs.shape[0], inputs.shape[1])
        mask = np.arange(inputs.shape[1])[None, :] < lengths[:, None]
        bad = first_nonfinite(np.where(mask[..., None], inputs, 0.0))
        if bad is not None:
            n, t, f = bad
            raise self.fail(
                "inputs",
                f"sequence {n}, step {t}, feature {f} of {self.options.inputs!r} is NaN or "
                "infinite; fill it in, or end that sequence before it with lengths",
            )
        return _Arrays(inputs, self._labels(inputs.shape[:2], mask), mask, lengths)

    def _array(self, key: str) -> np.ndarray:
        name = getattr(self.options, key)
        return require(self.arrays, name, self.path, self.source, f"task.{key}")

    def _inputs(self) -> np.ndarray:
        inputs = self._array("inputs")
        if inputs.ndim != 3 or 0 in inputs.shape:
            raise self.fail(
                "inputs",
                f"{self.options.inputs!r} has shape {inputs.shape}; it must be "
                "[sequences, steps, features], none of them 0",
            )
        return inputs.astype(np.float64)

    def _lengths(self, count: int, steps: int) -> np.ndarray:
        if self.options.lengths is None:
            return np.full(count, steps, dtype=np.int64)
        lengths = self._array("lengths").astype(np.float64)
        if lengths.shape != (count,):
            raise self.fail(
                "lengths",
                f"{self.options.lengths!r} has shape {lengths.shape}; it must be "
                f"[{count}], one length per sequence",
            )
        whole = np.isfinite(lengths) & (np.round(lengths) == lengths)
        bad = np.flatnonzero(~whole | (lengths < 1) | (lengths > steps))
        if bad.size:
            raise self.fail(
                "lengths",
                f"sequence {bad[0]} has length {_show(lengths[bad[0]])}; every length "
                f"must be a whole number from 1 to {steps} (the steps of inputs)",
            )
        return lengths.astype(np.int64)

    def _labels(self, shape: tuple[int, ...], mask: np.ndarray) -> np.ndarray:
        labels = self._array("labels").astype(np.float64)
        if labels.shape not in (shape[:1], shape):
            raise self.fail(
                "labels",
                f"{self.options.labels!r} has shape {labels.shape}; it must be "
                f"[{shape[0]}] (one class per sequence) or [{shape[0]}, {shape[1]}] (one per step)",
            )
        real = mask if labels.ndim == 2 else np.ones(labels.shape, dtype=bool)
        labels = np.where(real, labels, 0)  # padding's labels are never read
        whole = np.isfinite(labels) & (np.round(labels) == labels)
        top = self.options.classes
        out = ~whole | (labels < 0) | (labels >= top if top is not None else False)
        if out.any():
            where = np.unravel_index(int(np.argmax(out)), labels.shape)
            limit = f"[0, {top})" if top is not None else "0 or more"
            raise self.fail(
                "labels",
                f"label {_show(labels[where])} at {_position(where)} is out of range; "
                f"labels must be whole numbers {limit} (set classes, or fix the labels)",
            )
        return labels.astype(np.int64)


def _show(value: Any) -> str:
    number = float(value)
    return str(int(number)) if number.is_integer() else repr(number)


def _position(where: tuple[Any, ...]) -> str:
    return f"sequence {where[0]}" + (f", step {where[1]}" if len(where) > 1 else "")


def _classes(arrays: _Arrays, options: SequencesOptions, path: Path, source: str) -> int:
    if options.classes is not None:
        return options.classes
    found = int(arrays.labels.max()) + 1
    if found < 2:
        raise SpecError(
            source, "task.labels", f"{path.name}: every label is 0; a classifier needs 2 classes"
        )
    return found


def _split_index(
    count: int, options: SequencesOptions, path: Path, source: str
) -> dict[Split, np.ndarray]:
    """Sequence indices of each split, each in file order."""
    if options.shuffle:
        seed = derive_seed("task-data", "sequences", options.seed, "split")
        order = torch.randperm(count, generator=generator(seed)).numpy()
    else:
        order = np.arange(count)
    tests, valids = round(count * options.test_fraction), round(count * options.valid_fraction)
    parts: dict[Split, np.ndarray] = {
        "train": order[: count - valids - tests],
        "valid": order[count - valids - tests : count - tests],
        "test": order[count - tests :],
    }
    for split, rows in parts.items():
        if rows.size == 0 and (split != "test" or options.test_fraction):
            raise SpecError(
                source,
                "task.valid_fraction" if split != "test" else "task.test_fraction",
                f"{path.name} has {count} sequences, which leaves the {split} split empty; "
                "use more sequences or change the fractions",
            )
    return {split: np.sort(rows) for split, rows in parts.items()}


def _fit(inputs: np.ndarray, mask: np.ndarray, scale: bool) -> Scaling:
    features = inputs.shape[-1]
    if not scale:
        return Scaling(np.zeros(features), np.ones(features))
    real = inputs[mask]  # [real steps, F]
    std = real.std(axis=0)
    # a constant feature carries no information; centring it is enough
    return Scaling(real.mean(axis=0), np.where(std > 0, std, 1.0))


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> SequencesTask:
    parsed = parse_options(SequencesOptions, options, source, "sequences")
    return SequencesTask(parsed, base_dir, source)
