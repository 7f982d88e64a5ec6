"""Every use of optuna's private API, in one place.

sweeper needs a few things optuna has no public call for: claiming a queued trial, handing
a claim back, a trial's storage id, the heartbeat thread and table, and reading the stop
request without copying every study attribute. Each is one function here, and each has a
contract test against a real RDB storage (tests/test_optuna_internals.py), so an optuna
upgrade that changes one of them fails there first rather than inside a sweep.
"""

from __future__ import annotations

import contextlib
from typing import Any

import optuna
import sqlalchemy as sa
from optuna.storages._heartbeat import (
    BaseHeartbeat,
    HeartbeatThread,
    get_heartbeat_thread,
    is_heartbeat_enabled,
)
from optuna.storages._rdb.models import TrialHeartbeatModel
from optuna.trial import FrozenTrial, TrialState

from sweeper.store.heartbeat import HeartbeatTiming


def cached_storage(study: optuna.Study) -> Any:
    """The storage a study talks to: optuna's cache layer over the RDB storage.

    Trial states change through this layer, as optuna's own stale-trial check does, so the
    cache never holds a state the database no longer has.
    """
    return study._storage


def rdb_storage(study: optuna.Study) -> optuna.storages.RDBStorage:
    """The RDB storage under a study's cache layer."""
    storage = cached_storage(study)
    return getattr(storage, "_backend", storage)


def trial_id(trial: FrozenTrial | optuna.Trial) -> int:
    """A trial's id in the storage (trial numbers count within a study, ids across studies)."""
    return int(trial._trial_id)


def frozen_copy(trial: optuna.Trial) -> FrozenTrial:
    """A running trial as stored right now, system attributes included."""
    return trial.storage.get_trial(trial_id(trial))


def study_user_attrs(study: optuna.Study) -> dict[str, Any]:
    """The study's user attributes as stored, without the deep copy ``study.user_attrs``
    makes (workers poll the stop request every second)."""
    return cached_storage(study).get_study_user_attrs(study._study_id)


def claim_waiting_trial(study: optuna.Study) -> int | None:
    """Move one waiting trial to RUNNING for this process; its id, or None when none waits."""
    return study._pop_waiting_trial_id()


def return_to_queue(study: optuna.Study, claimed_id: int) -> bool:
    """Put a trial this process claimed back to WAITING; whether the state changed."""
    return bool(cached_storage(study).set_trial_state_values(claimed_id, TrialState.WAITING))


def fail_running(study: optuna.Study, running_id: int) -> bool:
    """Fail a running trial; False when it had finished, or changed state, meanwhile."""
    try:
        return bool(cached_storage(study).set_trial_state_values(running_id, TrialState.FAIL))
    except optuna.exceptions.UpdateFinishedTrialError:  # its worker was alive after all
        return False


def retry_as_stale(study: optuna.Study, failed_id: int) -> None:
    """Run the storage's stale-trial callback (the retry) on a trial failed for silence."""
    storage = cached_storage(study)
    retry = storage.get_heartbeat_stale_trial_callback()
    if retry is not None:
        retry(study, storage.get_trial(failed_id))


def heartbeat_thread(study: optuna.Study, running_id: int) -> Any:
    """A context manager that records the trial's heartbeat every interval while it runs.

    A beat that cannot be written (a full disk, a lock held too long) is skipped rather than
    ending the thread with a traceback: the trial's own next write reports the fault in one
    line, and beats that stay missing make the trial stale, which retries it.
    """
    storage = cached_storage(study)
    if not is_heartbeat_enabled(storage):
        return get_heartbeat_thread(running_id, storage)
    return HeartbeatThread(running_id, _SkippingBeats(storage))


class _SkippingBeats(BaseHeartbeat):
    """The storage's heartbeat, with beats that fail on the database skipped."""

    def __init__(self, storage: Any) -> None:
        self._storage = storage

    def record_heartbeat(self, trial_id: int) -> None:
        with contextlib.suppress(sa.exc.OperationalError, optuna.exceptions.StorageInternalError):
            self._storage.record_heartbeat(trial_id)

    def _get_stale_trial_ids(self, study_id: int) -> list[int]:
        return self._storage._get_stale_trial_ids(study_id)

    def get_heartbeat_interval(self) -> int | None:
        return self._storage.get_heartbeat_interval()

    def get_heartbeat_stale_trial_callback(self) -> Any:
        return self._storage.get_heartbeat_stale_trial_callback()


def trials_with_heartbeat(study: optuna.Study) -> set[int]:
    """Ids of the trials that have recorded at least one heartbeat."""
    table = TrialHeartbeatModel.__table__
    with rdb_storage(study).engine.connect() as connection:
        return set(connection.execute(sa.select(table.c.trial_id)).scalars())


def set_heartbeat(storage: optuna.storages.RDBStorage, timing: HeartbeatTiming) -> None:
    """Beat every ``timing.interval``; a trial silent for ``timing.stale_after`` is stale.

    optuna takes both only when the storage is built; a study's own heartbeat is known only
    once its stored spec has been read from that storage.
    """
    storage.heartbeat_interval = timing.interval
    storage.grace_period = timing.stale_after


def retry_stale_trials(storage: optuna.storages.RDBStorage, max_retry: int) -> None:
    """Queue a retry, with the same parameters, of each trial failed for a stale heartbeat."""
    storage.heartbeat_stale_trial_callback = optuna.storages.RetryHeartbeatStaleTrialCallback(
        max_retry=max_retry
    )
