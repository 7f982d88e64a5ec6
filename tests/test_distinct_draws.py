"""A sweep never spends a trial on a configuration it finished or is running: each worker
start draws from a fresh recorded stream, and a drawn copy is refused and drawn again."""

from __future__ import annotations

import multiprocessing
from pathlib import Path

import optuna
import pytest
from optuna.trial import TrialState, create_trial

from sweeper.spec.loading import parse_spec
from sweeper.spec.space import distributions, draw
from sweeper.store.attrs import StudyInfo
from sweeper.store.connect import open_storage
from sweeper.store.draw_streams import next_stream
from sweeper.store.tables import ensure_tables
from sweeper.sweep.distinct_sampler import (
    DistinctSampler,
    SpaceExhausted,
    config_key,
    draw_outcome,
)
from sweeper.sweep.runner import _draw_distinct
from sweeper.sweep.study import make_sampler

SPEC = """
[study]
name = "s"
sampler = "{sampler}"
[task]
kind = "adding"
length = 24
train_sequences = 32
valid_sequences = 16
[search]
{search}
"""
CONTINUOUS = 'lr = { between = [0.001, 0.1], scale = "log" }\nhidden = { between = [4, 64] }'
TWO_POINTS = "unroll = { one_of = [2, 4] }"


def _spec(search: str = CONTINUOUS, sampler: str = "tpe"):
    return parse_spec(SPEC.format(sampler=sampler, search=search), "s.toml")


def _first_draws(spec, sampler: optuna.samplers.BaseSampler, count: int = 4) -> list[tuple]:
    study = optuna.create_study(sampler=sampler)
    keys = []
    for _ in range(count):
        trial = study.ask()
        keys.append(config_key(draw(trial, spec.search), list(spec.search)))
        study.tell(trial, 1.0)
    return keys


def _finished(spec, params: dict, state: TrialState = TrialState.COMPLETE):
    value = 1.0 if state == TrialState.COMPLETE else None
    return create_trial(
        params=params, distributions=distributions(spec.search), value=value, state=state
    )


def test_each_worker_start_draws_a_fresh_stream_that_replays_from_its_record() -> None:
    spec = _spec()
    first, again = make_sampler(spec, 0), make_sampler(spec, 0)
    assert first.stream != again.stream  # same worker, same (empty) study: a new stream
    assert not set(_first_draws(spec, first)) & set(_first_draws(spec, again))
    # the recorded stream reproduces the draws
    replayed = make_sampler(spec, 0, stream=first.stream)
    assert _first_draws(spec, replayed) == _first_draws(spec, make_sampler(spec, 0, first.stream))


@pytest.mark.parametrize("state", [TrialState.COMPLETE, TrialState.PRUNED, TrialState.RUNNING])
def test_a_drawn_copy_of_a_finished_or_running_trial_is_refused(state: TrialState) -> None:
    spec = _spec()
    # what an identically seeded sampler proposes first (the old code's repeat after a resume)
    study = optuna.create_study(sampler=make_sampler(spec, 0, stream=5).base)
    repeat = draw(study.ask(), spec.search)
    sampler = make_sampler(spec, 0, stream=5)
    study = optuna.create_study(sampler=sampler)
    study.add_trial(_finished(spec, repeat, state))
    trial = study.ask()
    params = draw(trial, spec.search)
    assert params != repeat
    outcome = draw_outcome(trial)
    assert outcome is not None and outcome.redraws == 1 and not outcome.exhausted


def test_a_queued_trial_keeps_its_fixed_configuration() -> None:
    # retries, continuations and grid points are the same configuration by design
    spec = _spec(TWO_POINTS)
    study = optuna.create_study(sampler=make_sampler(spec, 0))
    study.add_trial(_finished(spec, {"unroll": 2}))
    study.enqueue_trial({"unroll": 2})
    trial = study.ask()
    assert draw(trial, spec.search)["unroll"] == 2
    assert draw_outcome(trial).redraws == 0


def test_a_small_space_is_drawn_without_repeats_until_it_is_used_up() -> None:
    spec = _spec(TWO_POINTS + "\nhidden = { one_of = [4, 8] }")
    study = optuna.create_study(sampler=make_sampler(spec, 0, stream=1))
    seen = set()
    for _ in range(4):
        study.enqueue_trial({})  # as the launcher queues the budget: no fixed values
        trial = study.ask()
        seen.add(config_key(draw(trial, spec.search), list(spec.search)))
        study.tell(trial, 1.0)
    assert len(seen) == 4
    study.enqueue_trial({})
    trial = study.ask()
    assert draw_outcome(trial).exhausted
    with pytest.raises(SpaceExhausted, match="every configuration of the search space"):
        _draw_distinct(trial, spec)
    assert "widen the space" in (StudyInfo.of(study).stop_request or "")
    assert trial.params == {}  # nothing drawn, nothing spent on a copy


def test_the_wrapper_refuses_copies_from_a_sampler_that_keeps_proposing_one_point() -> None:
    spec = _spec(TWO_POINTS + "\nhidden = { one_of = [4, 8, 16] }")

    class Stuck(optuna.samplers.RandomSampler):
        def sample_independent(self, study, trial, name, distribution):
            return {"unroll": 2, "hidden": 4}[name]

    study = optuna.create_study(sampler=DistinctSampler(Stuck(), spec.search, 0))
    for _ in range(6):
        trial = study.ask()
        draw(trial, spec.search)
        study.tell(trial, 1.0)
    keys = [config_key(t.params, list(spec.search)) for t in study.trials]
    assert len(set(keys)) == 6


def _take_streams(path: str, count: int, results) -> None:
    engine = open_storage(path).engine
    results.put([next_stream(engine, "s") for _ in range(count)])


def test_worker_starts_take_streams_in_order_and_never_share_one(tmp_path: Path) -> None:
    path = str(tmp_path / "streams.db")
    engine = open_storage(path).engine
    ensure_tables(engine)
    assert [next_stream(engine, "s"), next_stream(engine, "s")] == [0, 1]  # reproducible order
    assert next_stream(engine, "other study") == 0
    context = multiprocessing.get_context("fork")
    results = context.Queue()
    children = [context.Process(target=_take_streams, args=(path, 20, results)) for _ in "ab"]
    for child in children:
        child.start()
    taken = [results.get(timeout=60) for _ in children]
    for child in children:
        child.join(30)
    streams = taken[0] + taken[1]
    assert sorted(streams) == list(range(2, 42))  # simultaneous starts: each stream once
