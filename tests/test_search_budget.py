"""The compute budget: trials are launched and claimed only while the next one still fits."""

from __future__ import annotations

import io
import time
from pathlib import Path

import optuna
import pytest
from optuna.trial import FrozenTrial, TrialState

from sweeper.errors import SpecError
from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.sweep.study import (
    budget_met,
    claim_exceeds_budget,
    compute_room,
    compute_seconds,
    compute_use,
    load_existing,
)

REPO = Path(__file__).resolve().parents[1]


def _spec(hours: float, trials: int = 100, workers: int = 1) -> Spec:
    # the search's own budget, without the confirmation trials that follow it
    # (tests/test_confirmation.py)
    text = (
        f'[study]\nname = "budget"\ntrials = {trials}\nworkers = {workers}\n'
        f"compute_hours = {hours!r}\n"
        f'[task]\nkind = "objective"\nfunction = "tests.test_search_budget:tenth_of_a_second"\n'
        f'path = "{REPO.as_posix()}"\n[search]\nx = {{ between = [0.0, 1.0] }}\n'
        "[confirm]\nconfigurations = 0\n"
    )
    return parse_spec(text, "<budget>")


def tenth_of_a_second(params: dict, report) -> float:
    time.sleep(0.1)
    return params["x"]


def _trial(number: int, state: TrialState, seconds: float | None) -> FrozenTrial:
    attrs = {} if seconds is None else {"compute_seconds": seconds}
    value = 1.0 if state == TrialState.COMPLETE else None
    trial = optuna.trial.create_trial(state=state, value=value, user_attrs=attrs)
    trial.number = number
    return trial


DONE = [_trial(n, s, 10.0) for n, s in enumerate([TrialState.COMPLETE, TrialState.PRUNED] * 2)]
FAILED = _trial(4, TrialState.FAIL, 99.0)  # its retry carries its compute: counted there


def test_use_counts_finished_and_running_trials_but_not_failed_ones() -> None:
    running = _trial(5, TrialState.RUNNING, 4.0)
    use = compute_use([*DONE, FAILED, running])
    assert (use.spent, use.expected) == (44.0, 10.0)
    assert use.committed == 50.0  # the running trial is expected to cost at least the mean
    assert compute_seconds(_trial(6, TrialState.WAITING, None)) == 0.0


def test_room_is_what_fits_at_the_mean_cost_of_finished_trials() -> None:
    assert compute_room(DONE, _spec(hours=0.0)) is None  # no compute budget
    assert compute_room(DONE, _spec(hours=75 / 3600)) == 3  # 40 s spent, 3 more of 10 s fit
    assert compute_room(DONE, _spec(hours=49 / 3600)) == 0  # the next would end at 50 s
    assert not budget_met(DONE, _spec(hours=75 / 3600))
    assert budget_met(DONE, _spec(hours=49 / 3600))


def test_before_any_trial_finishes_each_worker_gets_one() -> None:
    assert compute_room([], _spec(hours=1.0, workers=3)) == 3
    spent = [_trial(0, TrialState.RUNNING, 4000.0)]
    assert compute_room(spent, _spec(hours=1.0, workers=3)) == 0


def test_a_claim_that_would_overrun_the_budget_is_refused() -> None:
    spec = _spec(hours=62 / 3600, workers=3)  # 40 s spent: room for two more of 10 s
    running = [_trial(n, TrialState.RUNNING, 1.0) for n in (4, 5, 6)]
    trials = DONE + running
    assert [claim_exceeds_budget(trials, n, spec) for n in (4, 5, 6)] == [False, False, True]


@pytest.mark.parametrize("hours", [-1.0, float("nan"), float("inf")])
def test_compute_hours_must_be_a_finite_positive_number(hours: float) -> None:
    with pytest.raises(SpecError, match=r"study\.compute_hours: must be a number of hours >= 0"):
        _spec(hours=hours)


def test_a_sweep_stops_launching_when_the_next_trial_would_overrun(storage_location: str) -> None:
    # seconds: room for five trials of a tenth of a second, not six (on PostgreSQL about a
    # quarter: an objective plugin's time includes its storage round trips)
    limit = 0.55 if storage_location.endswith(".db") else 1.4
    spec = _spec(hours=limit / 3600).with_overrides(storage=storage_location)
    run_sweep(spec, ProgressDisplay(io.StringIO()))
    study, stored = load_existing(spec.storage_location)
    trials = study.trials
    assert stored.study.compute_hours == spec.study.compute_hours
    assert all(t.state == TrialState.COMPLETE for t in trials)
    costs = [compute_seconds(t) for t in trials]
    spent, spread = sum(costs), max(costs) - min(costs)
    mean = spent / len(trials)
    assert 3 <= len(trials) < 100
    # only the last trial's overrun of the mean it was launched on goes past the limit
    assert spent <= limit + 0.02 + spread
    assert spent + mean > limit  # and the next trial would not have fitted
    assert budget_met(trials, stored)
