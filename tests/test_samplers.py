"""Samplers: each name builds what it promises, impossible spaces are refused before a study
exists, and grid points are run once each even by two workers."""

from __future__ import annotations

import io
import json
import math
import random
import statistics
import time
from pathlib import Path

import optuna
import pytest
from optuna.distributions import FloatDistribution
from optuna.trial import FrozenTrial, TrialState, create_trial

from sweeper.errors import SpecError
from sweeper.spec.loading import parse_spec
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import load_existing, make_sampler

REPO = Path(__file__).resolve().parents[1]
TRAINING = """
[study]
name = "s"
sampler = "{sampler}"
[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 12
train_sequences = 32
valid_sequences = 16
[search]
{search}
"""
RANGES = 'unroll = { between = [2, 12] }\nlr = { between = [0.001, 0.1], scale = "log" }'


def _spec(sampler: str, search: str = RANGES) -> object:
    return parse_spec(TRAINING.format(sampler=sampler, search=search), "s.toml")


def test_each_sampler_name_builds_its_sampler() -> None:
    assert isinstance(make_sampler(_spec("tpe"), 0).base, optuna.samplers.TPESampler)
    assert isinstance(make_sampler(_spec("sobol"), 0).base, optuna.samplers.QMCSampler)
    assert isinstance(make_sampler(_spec("cmaes"), 0).base, optuna.samplers.CmaEsSampler)
    assert isinstance(make_sampler(_spec("random"), 0).base, optuna.samplers.RandomSampler)
    # grid points arrive fully fixed through the queue; the sampler draws nothing
    grid = _spec("grid", "unroll = { one_of = [2, 4] }")
    assert isinstance(make_sampler(grid, 0).base, optuna.samplers.RandomSampler)


UNIT_SQUARE = "x = { between = [0.0, 1.0] }\ny = { between = [0.0, 1.0] }"
SQUARE = {"x": FloatDistribution(0.0, 1.0), "y": FloatDistribution(0.0, 1.0)}


def _tpe(worker_index: int = 0) -> optuna.samplers.BaseSampler:
    return make_sampler(
        _objective_spec(Path("."), "bowl", "tpe", UNIT_SQUARE), worker_index, stream=0
    )


def _draw(sampler: optuna.samplers.BaseSampler, trials: list[FrozenTrial]) -> dict:
    study = optuna.create_study(sampler=sampler)
    study.add_trials(trials)
    return study.ask(SQUARE).params


def _square_trial(x: float, y: float, value: float | None = None) -> FrozenTrial:
    state = TrialState.RUNNING if value is None else TrialState.COMPLETE
    return create_trial(params={"x": x, "y": y}, distributions=SQUARE, value=value, state=state)


def test_tpe_draws_the_parameters_together() -> None:
    # The good trials lie on the line x + y = 1, spread along all of it, so each parameter's
    # good values alone cover [0, 1]. Drawn one at a time, x + y - 1 is triangular on
    # [-1, 1] with mean |x + y - 1| = 1/3 (sum of two independent U(0, 1), derived); drawn
    # together, the draws stay near the line.
    points = random.Random(0)
    good = [_square_trial((i + 0.5) / 10, 1 - (i + 0.5) / 10, 0.0) for i in range(10)]
    others = [(points.random(), points.random()) for _ in range(90)]
    bad = [_square_trial(x, y, 1.0 + abs(x + y - 1)) for x, y in others]
    draws = [_draw(_tpe(worker), good + bad) for worker in range(30)]
    gaps = [abs(d["x"] + d["y"] - 1) for d in draws]
    assert statistics.mean(gaps) < 1 / 6, gaps


def test_tpe_steers_away_from_trials_other_workers_are_running() -> None:
    # A running trial counts as a bad result until it finishes (a "constant liar"), so a
    # second worker does not propose the point a first worker already runs; a sampler that
    # ignored running trials would draw that same point again (same seed, same finished trials).
    finished = [_square_trial((i + 0.5) / 8, 0.5, (i / 8 - 0.3) ** 2) for i in range(8)]
    first = _draw(_tpe(), finished)
    second = _draw(_tpe(), [*finished, _square_trial(first["x"], first["y"])])
    assert second != first


def test_sobol_draws_cover_the_space_evenly() -> None:
    # Sobol 1967: the first 2^m points of the first two Sobol dimensions put exactly one point
    # in each of the 2^m columns and each of the 2^m rows of the unit square; Owen's
    # scrambling (1995) keeps that. optuna draws the first trial at random, then the sequence.
    sampler = make_sampler(_objective_spec(Path("."), "bowl", "sobol", UNIT_SQUARE), 0, stream=0)
    study = optuna.create_study(sampler=sampler)
    for _ in range(9):
        trial = study.ask(SQUARE)
        study.tell(trial, 0.0)
    points = [(t.params["x"], t.params["y"]) for t in study.trials[1:]]
    assert sorted(math.floor(x * 8) for x, _ in points) == list(range(8))
    assert sorted(math.floor(y * 8) for _, y in points) == list(range(8))


@pytest.mark.parametrize(
    ("search", "message"),
    [
        (
            RANGES + "\nhidden = { one_of = [8, 16] }",
            "s.toml: search.hidden: the cmaes sampler searches ranges only; write this as "
            '{ between = [low, high] }, fix it to one value, or use sampler = "tpe"',
        ),
        (
            "unroll = 4\nlr = 0.01",
            "s.toml: search: the cmaes sampler needs at least one range to search; add one, "
            'or use sampler = "tpe"',
        ),
    ],
)
def test_cmaes_refuses_choices_and_spaces_without_ranges(search: str, message: str) -> None:
    with pytest.raises(SpecError) as caught:
        _spec("cmaes", search)
    assert str(caught.value) == message


def test_cmaes_takes_integer_and_real_ranges() -> None:
    assert _spec("cmaes").study.sampler == "cmaes"


def bowl(params: dict, report) -> float:
    return (params["x"] - 0.3) ** 2 + (params["y"] + 0.2) ** 2


def slow_grid_point(params: dict, report) -> float:
    time.sleep(0.3)  # long enough that both workers hold trials at once
    return float(params["x"] * 10 + params["y"])


def _objective_spec(folder: Path, function: str, sampler: str, search: str, **study: object):
    extra = "".join(f"{key} = {value}\n" for key, value in study.items())
    text = (
        f'[study]\nname = "{function}"\nsampler = "{sampler}"\n{extra}'
        f'storage = "{(folder / "study.db").as_posix()}"\n'
        "[confirm]\nconfigurations = 0\n"
        f'[task]\nkind = "objective"\nfunction = "tests.test_samplers:{function}"\n'
        f'path = "{REPO.as_posix()}"\n[search]\n{search}\n'
    )
    return parse_spec(text, f"<{function}>")


def test_a_cmaes_sweep_draws_its_trials_from_cma_es(tmp_path: Path) -> None:
    search = "x = { between = [-1.0, 1.0] }\ny = { between = [-1.0, 1.0] }"
    spec = _objective_spec(tmp_path, "bowl", "cmaes", search, trials=12, seed=4)
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    study, _ = load_existing(spec.storage_location)
    assert len(study.trials) == 12
    # optuna's CMA-ES marks each trial it proposes with its generation; the first is random
    marked = [any(k.endswith("generation") for k in t.system_attrs) for t in study.trials]
    assert marked == [False] + [True] * 11


def test_two_workers_run_every_grid_point_once_and_stop_when_it_is_done(tmp_path: Path) -> None:
    search = "x = { between = [0, 5] }\ny = { one_of = [1, 2] }"
    spec = _objective_spec(tmp_path, "slow_grid_point", "grid", search, trials=50, workers=2)
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    study, _ = load_existing(spec.storage_location)
    trials = study.trials
    assert len(trials) == 12 and all(t.state == TrialState.COMPLETE for t in trials)
    points = sorted(json.dumps(t.params, sort_keys=True) for t in trials)
    expected = sorted(
        json.dumps({"x": x, "y": y}, sort_keys=True) for x in range(6) for y in (1, 2)
    )
    assert points == expected
    assert len({t.user_attrs["worker"] for t in trials}) == 2
    # the grid is exhausted: a later launch, even with a larger budget, queues nothing
    again = run_sweep(spec.with_overrides(trials=80), ProgressDisplay(io.StringIO()))
    assert (again.queued, again.ran) == (0, 0)
