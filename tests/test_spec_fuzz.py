"""Any TOML document yields a spec or our own SpecError, never another exception."""

from __future__ import annotations

import json

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sweeper.errors import SpecError
from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec

KEYS = [
    "name",
    "trials",
    "workers",
    "seed",
    "goal",
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


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sections)
def test_structured_documents(document: dict[str, dict[str, object]]) -> None:
    try:
        assert isinstance(parse_spec(to_toml(document), "fuzz.toml"), Spec)
    except SpecError as error:
        assert str(error).startswith("fuzz.toml")
        assert "\n" not in str(error)


@settings(max_examples=150, deadline=None)
@given(st.text(max_size=200))
def test_arbitrary_text(text: str) -> None:
    try:
        parse_spec(text, "fuzz.toml")
    except SpecError as error:
        assert str(error).startswith("fuzz.toml")
