"""Task options: typed, frozen dataclasses built from a spec's ``[task]`` table.

Each task module owns one options dataclass. ``parse_options`` checks the keys and types and
builds it; the dataclass checks ranges in ``__post_init__`` by raising ``OptionError``, which
``parse_options`` turns into a ``SpecError`` that names the file and the dotted key.
"""

from __future__ import annotations

import dataclasses
import types
import typing
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any, TypeVar

from sweeper.did_you_mean import closest
from sweeper.errors import SpecError
from sweeper.seeds import derive_seed

T = TypeVar("T")


class OptionError(ValueError):
    """A task option breaks a rule; ``key`` is the option's name inside ``[task]``."""

    def __init__(self, key: str, message: str) -> None:
        super().__init__(f"{key}: {message}")
        self.key = key
        self.message = message


def unknown_key_message(key: str, valid: Iterable[str], what: str) -> str:
    """One line that rejects ``key`` and suggests the nearest valid name."""
    names = sorted(valid)
    close = closest(key, names)
    hint = f"did you mean {close!r}? " if close else ""
    return f"unknown {what} {key!r}; {hint}valid: {', '.join(names)}"


def parse_options(cls: type[T], options: Mapping[str, Any], source: str, task: str) -> T:
    """Build the options dataclass ``cls`` from ``options``; every problem is a SpecError."""
    hints = typing.get_type_hints(cls)
    names = [field.name for field in dataclasses.fields(cls)]  # type: ignore[arg-type]
    values: dict[str, Any] = {}
    try:
        for key, value in options.items():
            if key not in names:
                raise OptionError(key, unknown_key_message(key, names, f"{task} option"))
            values[key] = coerce(key, value, hints[key])
        return cls(**values)
    except OptionError as error:
        raise SpecError(source, f"task.{error.key}", error.message) from None


def coerce(key: str, value: Any, hint: Any) -> Any:
    """Check ``value`` against the type ``hint``; widen int to float, str to a 1-tuple."""
    if typing.get_origin(hint) in (typing.Union, types.UnionType):
        if value is None and type(None) in typing.get_args(hint):
            return None
        (hint,) = [arg for arg in typing.get_args(hint) if arg is not type(None)]
    if typing.get_origin(hint) is tuple:
        return _coerce_names(key, value)
    if hint is float and isinstance(value, int) and not isinstance(value, bool):
        return float(value)
    if hint is int and isinstance(value, bool):
        raise OptionError(key, f"must be a whole number, got {value!r}")
    if not isinstance(value, hint):
        raise OptionError(key, f"must be {_TYPE_WORDS[hint]}, got {value!r} ({_kind(value)})")
    return value


def _coerce_names(key: str, value: Any) -> tuple[str, ...]:
    if isinstance(value, str):
        return (value,)
    if isinstance(value, list | tuple) and all(isinstance(item, str) for item in value):
        return tuple(value)
    raise OptionError(key, f"must be a name or a list of names, got {value!r} ({_kind(value)})")


_TYPE_WORDS = {int: "a whole number", float: "a number", str: "a string", bool: "true or false"}


def _kind(value: Any) -> str:
    return type(value).__name__


def check_at_least(key: str, value: float, minimum: float) -> None:
    if value < minimum:
        raise OptionError(key, f"must be >= {minimum}, got {value!r}")


def check_fraction(key: str, value: float) -> None:
    if not 0 < value < 1:
        raise OptionError(key, f"must be strictly between 0 and 1, got {value!r}")


def check_split_fractions(valid_fraction: float, test_fraction: float) -> None:
    """A test fraction in [0, 1) that leaves rows to train on beside the validation ones."""
    if not 0 <= test_fraction < 1:
        raise OptionError("test_fraction", f"must be in [0, 1), got {test_fraction!r}")
    if valid_fraction + test_fraction >= 1:
        raise OptionError(
            "test_fraction",
            f"valid_fraction + test_fraction = {valid_fraction + test_fraction:g} leaves no "
            "training rows; keep the sum below 1",
        )


@dataclass(frozen=True)
class GeneratedOptions:
    """Options every generated task shares: the data seed and how many sequences to draw."""

    seed: int = 0
    train_sequences: int = 1000
    valid_sequences: int = 200

    def __post_init__(self) -> None:
        check_at_least("train_sequences", self.train_sequences, 1)
        check_at_least("valid_sequences", self.valid_sequences, 1)

    def sequences_in(self, split: str) -> int:
        return self.train_sequences if split == "train" else self.valid_sequences

    def split_seed(self, task: str, split: str) -> int:
        """Train and validation data come from different seeds derived from the task seed."""
        return derive_seed("task-data", task, self.seed, split)
