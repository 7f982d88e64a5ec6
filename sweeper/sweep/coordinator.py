"""The one process that queues a study's trials, fails stale ones and watches for failures."""

from __future__ import annotations

import datetime as dt
import os
import socket
import time

import optuna
from optuna.storages import fail_stale_trials
from optuna.trial import TrialState

from sweeper.errors import TooManyFailures
from sweeper.spec.sections import Spec
from sweeper.store import tables
from sweeper.store.attrs import StudyInfo, TrialInfo
from sweeper.store.connect import engine_of, is_sqlite, open_storage, redact, storage_url
from sweeper.store.heartbeat import HeartbeatTiming
from sweeper.store.optuna_internals import rdb_storage, retry_stale_trials, set_heartbeat
from sweeper.sweep import lease
from sweeper.sweep.lost_claims import fail_unstarted_trials
from sweeper.sweep.progress import ProgressDisplay, Snapshot, snapshot
from sweeper.sweep.study import budget_of, request_stop, top_up

STEP_SECONDS = 2.0  # a trial budget is queued at once; heartbeats are noticed in seconds
QUICK_STEP_SECONDS = 0.5


def _queue_short(snap: Snapshot, workers: int) -> bool:
    """More trials are needed than are queued for the workers (a compute budget queues one
    trial per worker at a time): a worker may be waiting for the next step."""
    counts = snap.counts
    unqueued = snap.budget - counts.finished - counts.running - counts.waiting
    return counts.waiting < workers and unqueued > 0


def stored_budget(study: optuna.Study, spec: Spec) -> Spec:
    """The spec with the stored budget (another host may have raised it). The worker count
    stays this launch's: a --workers override is not stored."""
    return spec.with_overrides(trials=StudyInfo.of(study).budget)


def read_view(study: optuna.Study, location: str) -> optuna.Study:
    """The study through a connection that only reads.

    On SQLite every transaction of a writing connection takes the write lock first (see
    ``connect._begin_immediate``), reads too; with many workers on few cores the lock is
    nearly always held, and the launcher's display waited behind it for minutes.
    """
    if not is_sqlite(storage_url(location)):
        return study  # a server's reads do not wait for its writers
    storage = open_storage(location, create=False, read_only=True)
    return optuna.load_study(study_name=study.study_name, storage=storage)


class Coordinator:
    """Queue trials, fail stale ones (which queues their retries), watch for failures.

    Only the holder of the study's lease acts; any other coordinator only watches, so that
    launchers and joining workers on many hosts never queue trials at the same time.
    """

    def __init__(self, study: optuna.Study, spec: Spec, display: ProgressDisplay) -> None:
        self.study = study
        self.spec = spec
        self.display = display
        self.launched = dt.datetime.now()
        self.queued = 0
        self.holder = f"{socket.gethostname()}:{os.getpid()}:coordinator"
        backend = rdb_storage(study)
        set_heartbeat(backend, HeartbeatTiming(spec.study.heartbeat))
        retry_stale_trials(backend, spec.study.max_retries)
        tables.ensure_tables(engine_of(study))
        self.view = read_view(study, spec.storage_location)  # the display's reads
        self._due = 0.0  # when `step_when_due` steps next (time.monotonic)

    def step(self) -> Snapshot:
        """Show the study's state, then (as the lease holder) queue and fail trials.

        The display comes first, from the read-only view, which never waits for SQLite's
        write lock; the writes below wait for it, behind every busy worker.
        """
        self.spec = stored_budget(self.view, self.spec)
        snap = self._show()
        timing = HeartbeatTiming(self.spec.study.heartbeat)
        engine = engine_of(self.study)
        queued = 0
        if lease.acquire(engine, self.study.study_name, self.holder, timing.lease_seconds):
            fail_stale_trials(self.study)
            fail_unstarted_trials(self.study, timing.unstarted_after)
            self._check_failures()
            queued = top_up(self.study, self.spec)
            self.queued += queued
        if queued:  # show the new trials waiting (only then: every read costs the workers)
            snap = self._show()
        short = _queue_short(snap, self.spec.study.workers)
        self._due = time.monotonic() + (QUICK_STEP_SECONDS if short else STEP_SECONDS)
        return snap

    def _show(self) -> Snapshot:
        snap = snapshot(self.view, budget_of(self.spec), self.spec.study.workers)
        self.display.update(snap)
        return snap

    def step_when_due(self) -> None:
        """``step``, at most every ``STEP_SECONDS`` while the queue holds enough trials.

        Each step reads every trial and renews the lease: on a machine whose cores all train,
        stepping twice a second took about 4% of a core from the workers.
        """
        if time.monotonic() >= self._due:
            self.step()

    def close(self) -> None:
        lease.release(engine_of(self.study), self.study.study_name, self.holder)
        if self.view is not self.study:
            engine_of(self.view).dispose()

    def _check_failures(self) -> None:
        limit = self.spec.study.max_failures
        ended = [
            t
            for t in self.study.get_trials(deepcopy=False)
            if t.datetime_complete is not None
            and t.datetime_complete >= self.launched
            and t.state in (TrialState.COMPLETE, TrialState.PRUNED, TrialState.FAIL)
            and not (t.state == TrialState.FAIL and TrialInfo.of(t).failure is None)
        ]
        ended.sort(key=lambda t: (t.datetime_complete, t.number))
        recent = ended[-limit:]
        if len(recent) == limit and all(t.state == TrialState.FAIL for t in recent):
            last = TrialInfo.of(recent[-1]).failure
            assert last is not None  # only trials that recorded a failure are counted
            reason = (
                f"{limit} trials in a row failed; the last (trial {recent[-1].number}) raised "
                f"{last.kind}: {last.message}"
            )
            request_stop(self.study, reason)
            raise TooManyFailures(redact(reason))
