"""Search-space invariants, checked with Hypothesis."""

from __future__ import annotations

import math

import optuna
from hypothesis import given, settings
from hypothesis import strategies as st

from sweeper.spec.loading import parse_spec
from sweeper.spec.space import Choices, Range, draw, grid_points, parse_entry

optuna.logging.set_verbosity(optuna.logging.WARNING)

bounds = st.tuples(
    st.floats(1e-6, 1e3, allow_nan=False), st.floats(1e-6, 1e3, allow_nan=False)
).filter(lambda pair: pair[0] < pair[1] * 0.999)


@settings(max_examples=40, deadline=None)
@given(bounds, st.booleans(), st.integers(0, 2**31 - 1))
def test_drawn_reals_stay_in_bounds(pair: tuple[float, float], log: bool, seed: int) -> None:
    low, high = pair
    entry = parse_entry(
        "t", "search.x", {"between": [low, high], "scale": "log" if log else "linear"}
    )
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=seed))
    for _ in range(3):
        trial = study.ask()
        value = draw(trial, {"x": entry})["x"]
        assert low <= value <= high
        study.tell(trial, value)


@settings(max_examples=40, deadline=None)
@given(st.integers(-50, 50), st.integers(1, 20), st.integers(1, 7), st.integers(0, 1000))
def test_drawn_integers_stay_on_their_steps(low: int, count: int, step: int, seed: int) -> None:
    high = low + count * step
    entry = parse_entry("t", "search.n", {"between": [low, high], "step": step})
    assert isinstance(entry, Range) and entry.integer
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=seed))
    trial = study.ask()
    value = draw(trial, {"n": entry})["n"]
    assert isinstance(value, int) and low <= value <= high and (value - low) % step == 0


@settings(max_examples=30, deadline=None)
@given(st.lists(st.integers(1, 64), min_size=1, max_size=5, unique=True))
def test_spec_round_trip_of_choices(values: list[int]) -> None:
    text = (
        '[study]\nname = "r"\n[task]\nkind = "objective"\nfunction = "operator:add"\n'
        f"[search]\nn = {{ one_of = {values} }}\n"
    )
    spec = parse_spec(text, "r.toml")
    assert spec.search["n"] == Choices(tuple(values))
    assert spec.canonical()["search"]["n"] == {"one_of": values}


def test_grid_points_cover_every_combination() -> None:
    space = {
        "a": parse_entry("t", "a", {"one_of": ["x", "y"]}),
        "b": parse_entry("t", "b", {"between": [0.0, 1.0], "step": 0.25}),
    }
    points = grid_points(space)
    assert points is not None and len(points) == 10
    assert {(p["a"], p["b"]) for p in points} == {
        (a, b) for a in "xy" for b in (0, 0.25, 0.5, 0.75, 1.0)
    }
    assert all(math.isfinite(p["b"]) for p in points)


def test_a_range_must_be_a_whole_number_of_steps() -> None:
    import pytest

    from sweeper.errors import SpecError

    expected = r"search\.n\.step: 0\.\.10 is not a whole number of steps of 3"
    with pytest.raises(SpecError, match=expected):
        parse_entry("t", "search.n", {"between": [0, 10], "step": 3})
