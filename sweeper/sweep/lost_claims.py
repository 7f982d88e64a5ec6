"""Trials claimed by a worker that died before their first heartbeat.

optuna fails a running trial once its heartbeat goes stale, and only then: a worker killed
between claiming a trial and recording its first heartbeat (a sibling's death takes down a
whole process pool at any moment) leaves a trial with no heartbeat at all, which would count
as running forever and hold the study short of its budget.
"""

from __future__ import annotations

import datetime as dt

import optuna
from optuna.trial import TrialState

from sweeper.store.optuna_internals import (
    fail_running,
    retry_as_stale,
    trial_id,
    trials_with_heartbeat,
)


def fail_unstarted_trials(study: optuna.Study, grace: float) -> list[int]:
    """Fail them and queue their retries as a stale heartbeat would; their trial numbers.

    ``grace``: seconds a claimed trial may go without a heartbeat
    (``HeartbeatTiming.unstarted_after``).
    """
    running = study.get_trials(deepcopy=False, states=(TrialState.RUNNING,))
    if not running:
        return []
    beating = trials_with_heartbeat(study)
    cutoff = dt.datetime.now() - dt.timedelta(seconds=grace)
    failed = []
    for trial in running:
        started = trial.datetime_start
        if trial_id(trial) in beating or started is None or started > cutoff:
            continue
        if not fail_running(study, trial_id(trial)):
            continue
        retry_as_stale(study, trial_id(trial))
        failed.append(trial.number)
    return failed
