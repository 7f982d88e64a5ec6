"""Trials claimed by a worker that died before their first heartbeat.

optuna fails a running trial once its heartbeat goes stale, and only then: a worker killed
between claiming a trial and recording its first heartbeat (a sibling's death takes down a
whole process pool at any moment) leaves a trial with no heartbeat at all, which would count
as running forever and hold the study short of its budget.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import optuna
import sqlalchemy as sa
from optuna.storages._rdb.models import TrialHeartbeatModel
from optuna.trial import TrialState

from sweeper.store.connect import engine_of

MIN_GRACE_SECONDS = 30.0  # clocks of different hosts set a trial's start time


def grace_seconds(heartbeat: float) -> float:
    """How long a claimed trial may go without any heartbeat before it is taken as dead."""
    return max(MIN_GRACE_SECONDS, 5.0 * heartbeat)


def fail_unstarted_trials(study: optuna.Study, grace: float) -> list[int]:
    """Fail them and queue their retries as a stale heartbeat would; their trial numbers."""
    running = study.get_trials(deepcopy=False, states=(TrialState.RUNNING,))
    if not running:
        return []
    table = TrialHeartbeatModel.__table__
    with engine_of(study).connect() as connection:
        beating = set(connection.execute(sa.select(table.c.trial_id)).scalars())
    cutoff = dt.datetime.now() - dt.timedelta(seconds=grace)
    storage: Any = study._storage  # through optuna's cache, as its own stale-trial check goes
    failed = []
    for trial in running:
        started = trial.datetime_start
        if trial._trial_id in beating or started is None or started > cutoff:
            continue
        try:
            if not storage.set_trial_state_values(trial._trial_id, state=TrialState.FAIL):
                continue
        except optuna.exceptions.UpdateFinishedTrialError:  # its worker was alive after all
            continue
        retry = storage.get_heartbeat_stale_trial_callback()
        if retry is not None:
            retry(study, storage.get_trial(trial._trial_id))
        failed.append(trial.number)
    return failed
