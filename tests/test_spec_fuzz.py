"""Any TOML document yields a spec or our own SpecError, never another exception; a spec
that parses survives a round trip through its canonical form, and its draws stay in bounds."""

from __future__ import annotations

import dataclasses
import json
import math

import optuna
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sweeper.errors import SpecError
from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import BETTER, RULES, Spec
from sweeper.spec.space import Choices, Fixed, SearchEntry, draw
from sweeper.training.params import CELLS, OPTIMIZERS

KEYS = [
    "name",
    "trials",
    "workers",
    "seed",
    "better",
    "objective",
    "sampler",
    "kind",
    "length",
    "delay",
    "symbols",
    "epochs",
    "unroll",
    "hidden",
    "clip",
    "lr",
    "cell",
    "batch",
    "dropout",
    "optimizer",
    "rule",
    "min_epochs",
    "between",
    "one_of",
    "scale",
    "step",
    "file",
    "function",
    "threads",
    "heartbeat",
    "train_sequences",
    "valid_sequences",
    "zzz",
]
WORDS = ["adding", "recall", "copy", "lstm", "gru", "log", "tpe", "grid", "median", "x", ""]

scalars = st.one_of(
    st.integers(-5, 200),
    st.floats(-10, 10, allow_nan=False, allow_infinity=False),
    st.booleans(),
    st.sampled_from(WORDS),
)
values = st.recursive(
    scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=3),
        st.dictionaries(st.sampled_from(KEYS), inner, max_size=3),
    ),
    max_leaves=6,
)
sections = st.dictionaries(
    st.sampled_from(["study", "task", "training", "search", "stopping", "extra"]),
    st.dictionaries(st.sampled_from(KEYS), values, max_size=6),
    max_size=5,
)


def to_toml_value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(to_toml_value(v) for v in value) + "]"
    assert isinstance(value, dict)
    return "{ " + ", ".join(f"{k} = {to_toml_value(v)}" for k, v in value.items()) + " }"


def to_toml(document: dict[str, dict[str, object]]) -> str:
    lines = []
    for section, table in document.items():
        lines.append(f"[{section}]")
        lines += [f"{key} = {to_toml_value(value)}" for key, value in table.items()]
    return "\n".join(lines) + "\n"


def _entry_toml(entry: SearchEntry) -> object:
    """A parsed search entry written back in the spec's own syntax."""
    if isinstance(entry, Fixed):
        return entry.value
    if isinstance(entry, Choices):
        return {"one_of": list(entry.values)}
    number = int if entry.integer else float
    written: dict[str, object] = {"between": [number(entry.low), number(entry.high)]}
    written["scale"] = "log" if entry.log else "linear"
    if entry.step is not None:
        written["step"] = number(entry.step)
    return written


def canonical_toml(spec: Spec) -> str:
    """The spec rebuilt from its parsed form alone (what a study stores and resume trusts)."""
    training = dataclasses.asdict(spec.training)
    document = {
        "study": dataclasses.asdict(spec.study),
        "task": spec.task.table(),
        "training": {**training.pop("defaults"), **training},
        "search": {name: _entry_toml(entry) for name, entry in spec.search.items()},
        "stopping": dataclasses.asdict(spec.stopping),
    }
    return to_toml(document)


def _in_bounds(entry: SearchEntry, value: object) -> bool:
    if isinstance(entry, Fixed):
        return value == entry.value
    if isinstance(entry, Choices):
        return value in entry.values
    assert isinstance(value, int | float)
    if entry.integer and not isinstance(value, int):
        return False
    on_grid = entry.step is None or math.isclose(
        round((value - entry.low) / entry.step) * entry.step, value - entry.low, abs_tol=1e-9
    )
    return entry.low <= value <= entry.high and on_grid


def check_parsed(spec: Spec) -> None:
    again = parse_spec(canonical_toml(spec), "again.toml")
    assert again.canonical() == spec.canonical()
    assert again.digest() == spec.digest()
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=0))
    for _ in range(5):
        values = draw(study.ask(), spec.search)
        assert set(values) == set(spec.search)
        for name, entry in spec.search.items():
            assert _in_bounds(entry, values[name]), (name, entry, values[name])


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sections)
def test_structured_documents(document: dict[str, dict[str, object]]) -> None:
    try:
        spec = parse_spec(to_toml(document), "fuzz.toml")
    except SpecError as error:
        assert str(error).startswith("fuzz.toml")
        assert "\n" not in str(error)
        return
    check_parsed(spec)


LENGTH = 24  # the adding task's sequences below: no unroll (default 20) may exceed it


@st.composite
def int_ranges(draw_from: st.DrawFn, low: int, high: int, log: bool = False) -> dict:
    first = draw_from(st.integers(low, high - 1))
    if log or draw_from(st.booleans()):
        last = draw_from(st.integers(first + 1, high))
        return {"between": [first, last], "scale": "log" if log else "linear"}
    step = draw_from(st.integers(1, high - first))
    steps = draw_from(st.integers(1, (high - first) // step))
    return {"between": [first, first + steps * step], "step": step}


@st.composite
def float_ranges(draw_from: st.DrawFn, low: float, high: float, log: bool = False) -> dict:
    middle = math.sqrt(low * high) if log else (low + high) / 2
    first = draw_from(st.floats(low, middle))
    if log:
        last = draw_from(st.floats(middle, high, exclude_min=True))
        return {"between": [first, last], "scale": "log"}
    if draw_from(st.booleans()):
        return {"between": [first, draw_from(st.floats(middle, high, exclude_min=True))]}
    # a stepped range on multiples of 1/8, which binary floats hold exactly (optuna warns
    # when float rounding leaves high - low a hair off a whole number of steps)
    start = draw_from(st.integers(math.ceil(low * 8), math.floor(middle * 8)))
    steps = draw_from(st.integers(1, math.floor(high * 8) - start))
    return {"between": [start / 8, (start + steps) / 8], "step": 0.125}


def _choices(values: list) -> st.SearchStrategy[dict]:
    return st.lists(st.sampled_from(values), min_size=1, unique=True).map(
        lambda picked: {"one_of": picked}
    )


SPACE = {
    "unroll": st.one_of(int_ranges(1, LENGTH), st.integers(1, LENGTH)),
    "hidden": st.one_of(int_ranges(1, 256, log=True), _choices([8, 16, 32, 64])),
    "lr": st.one_of(float_ranges(1e-5, 1.0, log=True), st.floats(1e-4, 1.0)),
    "clip": float_ranges(0.0, 5.0),
    "dropout": float_ranges(0.0, 0.75),
    "cell": st.one_of(_choices(list(CELLS)), st.sampled_from(CELLS)),
    "optimizer": st.one_of(_choices(list(OPTIMIZERS)), st.sampled_from(OPTIMIZERS)),
    "batch": _choices([1, 4, 16]),
}
valid_documents = st.fixed_dictionaries(
    {
        "study": st.fixed_dictionaries(
            {
                "name": st.sampled_from(["a", "sweep one"]),
                "better": st.sampled_from(BETTER),
                "trials": st.integers(1, 500),
                "seed": st.integers(0, 2**31),
                "sampler": st.sampled_from(["tpe", "random", "sobol"]),
            }
        ),
        "task": st.just(
            {"kind": "adding", "length": LENGTH, "train_sequences": 8, "valid_sequences": 4}
        ),
        "training": st.fixed_dictionaries({"epochs": st.integers(1, 50)}),
        "search": st.dictionaries(st.sampled_from(sorted(SPACE)), st.none(), min_size=1).flatmap(
            lambda names: st.fixed_dictionaries({name: SPACE[name] for name in names})
        ),
        "stopping": st.fixed_dictionaries(
            {
                "rule": st.sampled_from(RULES),
                "min_epochs": st.integers(1, 5),
                "reduction": st.integers(2, 4),
            }
        ),
    }
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(valid_documents)
def test_valid_specs_round_trip_and_draw_in_bounds(document: dict[str, dict[str, object]]) -> None:
    spec = parse_spec(to_toml(document), "valid.toml")
    check_parsed(spec)
    # nothing the file said was lost on the way in
    for section in ("study", "stopping"):
        for key, value in document[section].items():
            assert getattr(getattr(spec, section), key) == value
    for name, raw in document["search"].items():
        written, given = _entry_toml(spec.search[name]), _with_defaults(raw)
        assert json.dumps(written, sort_keys=True) == json.dumps(given, sort_keys=True)  # 1 != 1.0


def _with_defaults(raw: object) -> object:
    if isinstance(raw, dict) and "between" in raw:
        return {"scale": "linear", **raw}
    return raw


@settings(max_examples=150, deadline=None)
@given(st.text(max_size=200))
def test_arbitrary_text(text: str) -> None:
    try:
        parse_spec(text, "fuzz.toml")
    except SpecError as error:
        assert str(error).startswith("fuzz.toml")
