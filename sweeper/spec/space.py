"""The spec's search space: entries, optuna distributions, a trial's draw, grid points."""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from sweeper.did_you_mean import closest
from sweeper.errors import SpecError

if TYPE_CHECKING:  # optuna loads on first use: reading a spec should not wait for it
    import optuna
    from optuna.distributions import BaseDistribution

Scalar = bool | int | float | str
RANGE_KEYS = ("between", "scale", "step")
CHOICE_KEYS = ("one_of",)
GRID_LIMIT = 100_000


@dataclass(frozen=True)
class Fixed:
    value: Scalar

    def describe(self) -> Any:
        return self.value


@dataclass(frozen=True)
class Range:
    low: float
    high: float
    log: bool = False
    step: float | None = None
    integer: bool = False

    def describe(self) -> Any:
        return {
            "between": [self.low, self.high],
            "log": self.log,
            "step": self.step,
            "integer": self.integer,
        }

    def distribution(self) -> BaseDistribution:
        from optuna.distributions import FloatDistribution, IntDistribution

        if self.integer:
            step = int(self.step) if self.step else 1
            return IntDistribution(int(self.low), int(self.high), log=self.log, step=step)
        return FloatDistribution(self.low, self.high, log=self.log, step=self.step)

    def grid(self) -> list[Scalar] | None:
        """Every value of the range, or None when it is continuous (no step)."""
        if self.integer:
            step = int(self.step) if self.step else 1
            return list(range(int(self.low), int(self.high) + 1, step))
        if self.step is None:
            return None
        count = math.floor((self.high - self.low) / self.step + 1e-9) + 1
        return [round(self.low + i * self.step, 12) for i in range(count)]


@dataclass(frozen=True)
class Choices:
    values: tuple[Scalar, ...]

    def describe(self) -> Any:
        return {"one_of": list(self.values)}

    def distribution(self) -> BaseDistribution:
        from optuna.distributions import CategoricalDistribution

        return CategoricalDistribution(self.values)


SearchEntry = Fixed | Range | Choices


def _number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def parse_entry(source: str, key: str, raw: Any) -> SearchEntry:
    """One search-space entry: a scalar (fixed), {between = [lo, hi], ...} or {one_of = [...]}."""
    if isinstance(raw, bool | int | float | str):
        return Fixed(raw)
    if isinstance(raw, list):
        raise SpecError(source, key, "a list of values must be written as { one_of = [...] }")
    if not isinstance(raw, dict):
        raise SpecError(
            source, key, "must be a value, { between = [low, high] } or { one_of = [...] }"
        )
    if "one_of" in raw:
        return _parse_choices(source, key, raw)
    if "between" in raw:
        return _parse_range(source, key, raw)
    hint = next((closest(k, RANGE_KEYS + CHOICE_KEYS) for k in raw), None)
    fix = (
        f"did you mean '{hint}'?" if hint else "use { between = [low, high] } or { one_of = [...] }"
    )
    raise SpecError(source, key, f"neither a range nor a list of choices; {fix}")


def _parse_choices(source: str, key: str, raw: Mapping[str, Any]) -> Choices:
    for extra in raw:
        if extra != "one_of":
            raise SpecError(source, f"{key}.{extra}", "unknown key; a choice entry has only one_of")
    values = raw["one_of"]
    if not isinstance(values, list) or not values:
        raise SpecError(source, f"{key}.one_of", "must be a non-empty list of values")
    for value in values:
        if not isinstance(value, bool | int | float | str):
            raise SpecError(source, f"{key}.one_of", f"choices must be plain values, got {value!r}")
    if len(set(map(repr, values))) != len(values):
        raise SpecError(source, f"{key}.one_of", "lists a value twice; remove the repeat")
    return Choices(tuple(values))


def _parse_range(source: str, key: str, raw: Mapping[str, Any]) -> Range:
    for extra in raw:
        if extra not in RANGE_KEYS:
            hint = closest(extra, RANGE_KEYS)
            fix = f"did you mean '{hint}'?" if hint else f"valid keys: {', '.join(RANGE_KEYS)}"
            raise SpecError(source, f"{key}.{extra}", f"unknown key; {fix}")
    bounds = raw["between"]
    if not (isinstance(bounds, list) and len(bounds) == 2 and all(map(_number, bounds))):
        raise SpecError(source, f"{key}.between", "must be two numbers: [low, high]")
    low, high = bounds
    if not low < high:
        raise SpecError(
            source, f"{key}.between", f"empty range [{low}, {high}]; low must be < high"
        )
    scale = raw.get("scale", "linear")
    if scale not in ("linear", "log"):
        raise SpecError(source, f"{key}.scale", f"must be 'linear' or 'log', got {scale!r}")
    log = scale == "log"
    if log and low <= 0:
        raise SpecError(source, f"{key}.between", f"a log range needs low > 0, got {low}")
    step = raw.get("step")
    integer = isinstance(low, int) and isinstance(high, int)
    if step is not None:
        if not _number(step) or step <= 0:
            raise SpecError(source, f"{key}.step", f"must be a number > 0, got {step!r}")
        if log:
            raise SpecError(source, f"{key}.step", "a log range cannot have a step; drop one")
        if integer and not isinstance(step, int):
            raise SpecError(source, f"{key}.step", "an integer range needs a whole-number step")
        steps = (high - low) / step
        if abs(steps - round(steps)) > 1e-9:
            raise SpecError(
                source,
                f"{key}.step",
                f"{low:g}..{high:g} is not a whole number of steps of {step:g}; "
                "move high to low + k * step",
            )
    return Range(float(low), float(high), log, float(step) if step else None, integer)


def parse_search(source: str, table: Mapping[str, Any]) -> dict[str, SearchEntry]:
    return {name: parse_entry(source, f"search.{name}", raw) for name, raw in table.items()}


def distributions(space: Mapping[str, SearchEntry]) -> dict[str, BaseDistribution]:
    """The searched entries as optuna distributions (fixed entries are not searched)."""
    return {
        name: entry.distribution() for name, entry in space.items() if not isinstance(entry, Fixed)
    }


def fixed_values(space: Mapping[str, SearchEntry]) -> dict[str, Scalar]:
    return {name: entry.value for name, entry in space.items() if isinstance(entry, Fixed)}


def draw(trial: optuna.Trial, space: Mapping[str, SearchEntry]) -> dict[str, Any]:
    """Draw the trial's parameters in spec order; fixed entries are returned as given."""
    values: dict[str, Any] = {}
    for name, entry in space.items():
        if isinstance(entry, Fixed):
            values[name] = entry.value
        elif isinstance(entry, Choices):
            values[name] = trial.suggest_categorical(name, list(entry.values))
        elif entry.integer:
            step = int(entry.step) if entry.step else 1
            values[name] = trial.suggest_int(
                name, int(entry.low), int(entry.high), step=step, log=entry.log
            )
        else:
            values[name] = trial.suggest_float(
                name, entry.low, entry.high, step=entry.step, log=entry.log
            )
    return values


def grid_points(space: Mapping[str, SearchEntry]) -> list[dict[str, Scalar]] | None:
    """Every combination of the searched entries, or None if a range is continuous."""
    axes: dict[str, list[Scalar]] = {}
    for name, entry in space.items():
        if isinstance(entry, Range):
            values = entry.grid()
            if values is None:
                return None
            axes[name] = values
        elif isinstance(entry, Choices):
            axes[name] = list(entry.values)
    names = list(axes)
    return [dict(zip(names, combo, strict=True)) for combo in itertools.product(*axes.values())]


def grid_size(space: Mapping[str, SearchEntry]) -> int | None:
    size = 1
    for entry in space.values():
        if isinstance(entry, Range):
            values = entry.grid()
            if values is None:
                return None
            size *= len(values)
        elif isinstance(entry, Choices):
            size *= len(entry.values)
    return size
