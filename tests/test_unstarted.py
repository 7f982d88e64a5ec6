"""A trial claimed by a worker that died before its first heartbeat is retried, not kept."""

from __future__ import annotations

from pathlib import Path

from optuna.trial import TrialState

from sweeper.spec.loading import load_spec
from sweeper.store.heartbeat import HeartbeatTiming
from sweeper.store.optuna_internals import claim_waiting_trial, rdb_storage, trial_id
from sweeper.sweep.coordinator import Coordinator
from sweeper.sweep.launcher import open_for_launch
from sweeper.sweep.lost_claims import fail_unstarted_trials
from sweeper.sweep.progress import ProgressDisplay
from tests.conftest import write_tiny_spec


def test_claimed_without_a_heartbeat_is_failed_and_retried(
    storage_location: str, tmp_path: Path
) -> None:
    spec = load_spec(write_tiny_spec(tmp_path, trials=2)).with_overrides(storage=storage_location)
    study = open_for_launch(spec)
    coordinator = Coordinator(study, spec, ProgressDisplay(interval=0))  # sets up the retries
    try:
        coordinator.step()
        dead = claim_waiting_trial(study)  # claimed; its worker dies at once
        alive = claim_waiting_trial(study)
        assert dead is not None and alive is not None
        rdb_storage(study).record_heartbeat(alive)
        assert fail_unstarted_trials(study, grace=3600.0) == []  # too soon to tell
        assert fail_unstarted_trials(study, grace=0.0) == [0]
    finally:
        coordinator.close()
    by_id = {trial_id(t): t for t in study.get_trials()}
    assert by_id[dead].state == TrialState.FAIL
    assert by_id[alive].state == TrialState.RUNNING  # it has a heartbeat
    (retry,) = [t for t in by_id.values() if t.state == TrialState.WAITING]
    assert retry.system_attrs["failed_trial"] == by_id[dead].number


def test_grace_leaves_room_for_clock_differences_between_hosts() -> None:
    assert HeartbeatTiming(1).unstarted_after == 30.0
    assert HeartbeatTiming(10).unstarted_after == 50.0
