"""The contract sweeper relies on from optuna's private API, on SQLite and on PostgreSQL.

Every function of sweeper.store.optuna_internals is exercised here against a real RDB
storage, so an optuna upgrade that changes one of them fails in this file first.
"""

from __future__ import annotations

import time

import optuna
import pytest
from optuna.storages import fail_stale_trials
from optuna.trial import TrialState

from sweeper.store.connect import open_storage
from sweeper.store.heartbeat import HeartbeatTiming
from sweeper.store.optuna_internals import (
    cached_storage,
    claim_waiting_trial,
    fail_running,
    frozen_copy,
    heartbeat_thread,
    rdb_storage,
    retry_as_stale,
    retry_stale_trials,
    return_to_queue,
    set_heartbeat,
    study_user_attrs,
    trial_id,
    trials_with_heartbeat,
)
from sweeper.sweep.study import quiet_optuna


def _study(location: str, queued: int = 0) -> optuna.Study:
    quiet_optuna()
    study = optuna.create_study(storage=open_storage(location), study_name="contract")
    for x in range(queued):
        study.enqueue_trial({"x": float(x)})
    return study


def _states(study: optuna.Study) -> list[TrialState]:
    return [t.state for t in study.get_trials()]


def test_the_storage_under_a_study_is_the_rdb_storage_opened(storage_location: str) -> None:
    study = _study(storage_location)
    assert rdb_storage(study) is open_storage(storage_location)
    assert cached_storage(study) is not None


def test_a_trials_id_and_its_stored_copy(storage_location: str) -> None:
    study = _study(storage_location, queued=1)
    claimed = claim_waiting_trial(study)
    assert claimed is not None
    trial = optuna.Trial(study, claimed)  # as a worker runs what it claimed
    copy = frozen_copy(trial)
    assert trial_id(trial) == trial_id(copy) == trial_id(study.get_trials()[0]) == claimed
    assert copy.number == trial.number == 0
    assert copy.system_attrs["fixed_params"] == {"x": 0.0}  # what the queue stored


def test_study_user_attrs_read_what_was_written(storage_location: str) -> None:
    study = _study(storage_location)
    study.set_user_attr("stop_request", "because")
    assert study_user_attrs(study) == {"stop_request": "because"}
    other = optuna.load_study(study_name="contract", storage=open_storage(storage_location))
    other.set_user_attr("stop_request", None)  # written elsewhere, seen here at once
    assert study_user_attrs(study) == {"stop_request": None}


def test_claims_take_queued_trials_in_order_once(storage_location: str) -> None:
    study = _study(storage_location, queued=2)
    ids = [trial_id(t) for t in study.get_trials()]
    assert [claim_waiting_trial(study), claim_waiting_trial(study)] == ids
    assert claim_waiting_trial(study) is None
    assert _states(study) == [TrialState.RUNNING] * 2


def test_a_claim_handed_back_is_claimed_again(storage_location: str) -> None:
    study = _study(storage_location, queued=1)
    claimed = claim_waiting_trial(study)
    assert claimed is not None
    assert return_to_queue(study, claimed)
    assert _states(study) == [TrialState.WAITING]
    assert claim_waiting_trial(study) == claimed


def test_failing_a_running_trial_once(storage_location: str) -> None:
    study = _study(storage_location, queued=1)
    claimed = claim_waiting_trial(study)
    assert claimed is not None
    assert fail_running(study, claimed)
    assert _states(study) == [TrialState.FAIL]
    assert not fail_running(study, claimed)  # finished: optuna refuses, we report False


def test_a_trial_failed_for_silence_is_retried_with_its_parameters(
    storage_location: str,
) -> None:
    study = _study(storage_location, queued=1)
    claimed = claim_waiting_trial(study)
    assert claimed is not None
    optuna.Trial(study, claimed).suggest_float("x", 0.0, 1.0)  # the queued value
    fail_running(study, claimed)
    retry_as_stale(study, claimed)  # no retry callback set: nothing is queued
    assert _states(study) == [TrialState.FAIL]
    retry_stale_trials(rdb_storage(study), max_retry=2)
    retry_as_stale(study, claimed)
    failed, retry = study.get_trials()
    assert retry.state == TrialState.WAITING
    assert retry.system_attrs["failed_trial"] == failed.number
    assert retry.system_attrs["retry_history"] == [failed.number]
    assert retry.params == failed.params == {"x": 0.0}


def test_the_heartbeat_thread_records_beats(storage_location: str) -> None:
    study = _study(storage_location, queued=2)
    set_heartbeat(rdb_storage(study), HeartbeatTiming(1))
    beating, silent = claim_waiting_trial(study), claim_waiting_trial(study)
    assert beating is not None and silent is not None
    assert trials_with_heartbeat(study) == set()
    with heartbeat_thread(study, beating):
        deadline = time.monotonic() + 10
        while beating not in trials_with_heartbeat(study) and time.monotonic() < deadline:
            time.sleep(0.05)
    assert trials_with_heartbeat(study) == {beating}


def test_optuna_fails_a_trial_silent_for_stale_after(storage_location: str) -> None:
    study = _study(storage_location, queued=1)
    timing = HeartbeatTiming(1)
    storage = rdb_storage(study)
    set_heartbeat(storage, timing)
    retry_stale_trials(storage, max_retry=1)
    assert (storage.heartbeat_interval, storage.grace_period) == (1, 3)
    claimed = claim_waiting_trial(study)
    assert claimed is not None
    storage.record_heartbeat(claimed)
    fail_stale_trials(study)
    assert _states(study) == [TrialState.RUNNING]  # one beat ago: alive
    # SQLite's clock (CURRENT_TIMESTAMP) counts whole seconds: wait one more
    time.sleep(timing.stale_after + 1.5)
    fail_stale_trials(study)
    assert _states(study) == [TrialState.FAIL, TrialState.WAITING]  # failed, and retried


def test_heartbeat_timing_follows_from_the_interval() -> None:
    # the multipliers are sweeper's own choices (three missed beats: common practice)
    assert HeartbeatTiming(1).stale_after == 3 and HeartbeatTiming(10).stale_after == 30
    assert HeartbeatTiming(1).lease_seconds == 5.0 and HeartbeatTiming(4).lease_seconds == 12.0
    assert HeartbeatTiming().interval == 10
    with pytest.raises(ValueError, match="at least 1 s"):
        HeartbeatTiming(0)
