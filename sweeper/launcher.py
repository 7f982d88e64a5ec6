"""The launching process: create or continue the study, queue trials, watch the workers."""

from __future__ import annotations

import datetime as dt
import threading
from dataclasses import dataclass, field

import optuna
from optuna.storages import RetryHeartbeatStaleTrialCallback, fail_stale_trials
from optuna.trial import TrialState

from sweeper.checks import build_spec_task
from sweeper.errors import Interrupted, RunFailure, TooManyFailures
from sweeper.progress import ProgressDisplay, Snapshot, snapshot
from sweeper.spec import Spec
from sweeper.storage import open_storage, redact, set_heartbeat
from sweeper.study import (
    budget_of,
    create_or_continue,
    quiet_optuna,
    request_stop,
    spec_attrs,
    top_up,
)
from sweeper.workers import default_threads, install_stop_signals, run_parallel, work

WATCH_SECONDS = 0.5
STOP_WAIT_SECONDS = 8.0


@dataclass
class SweepResult:
    study_name: str
    location: str
    snapshot: Snapshot
    queued: int = 0
    ran: int = 0
    best_line: str = ""
    report: str | None = None
    notes: list[str] = field(default_factory=list)


def _task_attrs(spec: Spec) -> tuple[dict | None, str, str]:
    if spec.is_objective_plugin:
        return None, "objective", f"objective plugin {spec.task['function']}"
    task = build_spec_task(spec)
    baseline = task.baseline()
    data = {
        "value": baseline.value,
        "measure": baseline.measure,
        "description": baseline.description,
    }
    return data, task.name, task.describe()


def open_for_launch(spec: Spec) -> optuna.Study:
    """Create the study, or continue it when the spec matches the stored one."""
    quiet_optuna()
    baseline, task, description = _task_attrs(spec)
    storage = open_storage(spec.storage_location)
    set_heartbeat(storage, spec.study.heartbeat)
    storage.heartbeat_stale_trial_callback = RetryHeartbeatStaleTrialCallback(
        max_retry=spec.study.max_retries
    )
    attrs = spec_attrs(spec, baseline, task, description)
    attrs["metric_name"] = (
        "value" if spec.is_objective_plugin else build_spec_task(spec).metric_name
    )
    return create_or_continue(storage, spec, attrs)


class Coordinator:
    """Queue trials, fail stale ones (which queues their retries), and watch for failures."""

    def __init__(self, study: optuna.Study, spec: Spec, display: ProgressDisplay) -> None:
        self.study = study
        self.spec = spec
        self.display = display
        self.launched = dt.datetime.now()
        self.queued = 0

    def step(self) -> Snapshot:
        fail_stale_trials(self.study)
        self._check_failures()
        self.queued += top_up(self.study, self.spec)
        snap = snapshot(self.study, budget_of(self.spec), self.spec.study.workers)
        self.display.update(snap)
        return snap

    def _check_failures(self) -> None:
        limit = self.spec.study.max_failures
        ended = [
            t
            for t in self.study.get_trials(deepcopy=False)
            if t.datetime_complete is not None
            and t.datetime_complete >= self.launched
            and t.state in (TrialState.COMPLETE, TrialState.PRUNED, TrialState.FAIL)
            and not (t.state == TrialState.FAIL and "failure" not in t.user_attrs)
        ]
        ended.sort(key=lambda t: (t.datetime_complete, t.number))
        recent = ended[-limit:]
        if len(recent) == limit and all(t.state == TrialState.FAIL for t in recent):
            last = recent[-1].user_attrs["failure"]
            reason = (
                f"{limit} trials in a row failed; the last (trial {recent[-1].number}) raised "
                f"{last['type']}: {last['message']}"
            )
            request_stop(self.study, reason)
            raise TooManyFailures(redact(reason))


def run_sweep(spec: Spec, display: ProgressDisplay | None = None) -> SweepResult:
    """Run the spec's study to its budget with ``spec.study.workers`` workers.

    The first SIGINT or SIGTERM asks every worker to stop at its next window boundary and
    raises Interrupted once they have; a second one raises KeyboardInterrupt at once.
    """
    display = display or ProgressDisplay()
    study = open_for_launch(spec)
    coordinator = Coordinator(study, spec, display)
    threads = spec.training.threads or default_threads(spec.study.workers)
    stop = threading.Event()
    restore = install_stop_signals(stop)
    try:
        with display:
            before = coordinator.step().counts
            _watch(coordinator, spec, threads, stop)
            final = snapshot(study, budget_of(spec), spec.study.workers)
            display.final(final)
    finally:
        if restore is not None:
            restore()
    ran = final.counts.finished + final.counts.failed - before.finished - before.failed
    return SweepResult(
        study.study_name, spec.storage_location, final, coordinator.queued, ran, best_line(study)
    )


def best_line(study: optuna.Study) -> str:
    """The best trial in one line: its value, the task's baseline and its parameters."""
    try:
        best = study.best_trial
    except ValueError:
        return ""
    objective = study.user_attrs.get("objective", "value")
    baseline = study.user_attrs.get("baseline") or {}
    against = ""
    if baseline.get("measure") == objective:
        against = f" (baseline {baseline['value']:.5g})"
    params = ", ".join(f"{name}={_short(value)}" for name, value in best.params.items())
    return f"best trial {best.number}: {objective} {best.value:.5g}{against}; {params}"


def _short(value: object) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def _start_workers(
    spec: Spec,
    threads: int,
    stop: threading.Event,
    finished: threading.Event,
    errors: list[BaseException],
) -> threading.Thread:
    location, name = spec.storage_location, spec.study.name
    if spec.study.workers > 1:
        return run_parallel(location, name, spec.study.workers, threads, finished.set, errors)

    # One worker runs in this process (clean tracebacks); the launcher keeps the main thread.
    def single() -> None:
        try:
            work(location, name, 0, threads, stop)
        except BaseException as error:  # surfaced in the launcher
            errors.append(error)
        finally:
            finished.set()

    thread = threading.Thread(target=single, name="sweeper-worker", daemon=True)
    thread.start()
    return thread


def _watch(coordinator: Coordinator, spec: Spec, threads: int, stop: threading.Event) -> None:
    finished = threading.Event()
    errors: list[BaseException] = []
    thread = _start_workers(spec, threads, stop, finished, errors)
    try:
        while not finished.wait(WATCH_SECONDS):
            if stop.is_set():
                _stop_workers(coordinator, finished)
            coordinator.step()
    except TooManyFailures:
        finished.wait(60)
        raise
    thread.join(timeout=5)
    if stop.is_set():
        _stop_workers(coordinator, finished)
    if errors:
        error = errors[0]
        if isinstance(error, RunFailure):
            raise error
        raise RunFailure(f"a worker stopped: {type(error).__name__}: {redact(str(error))}")
    coordinator.step()


def _stop_workers(coordinator: Coordinator, finished: threading.Event) -> None:
    """Ask every worker to stop, wait for them briefly, then leave with exit code 130."""
    request_stop(coordinator.study, "interrupted")
    finished.wait(STOP_WAIT_SECONDS)
    location = coordinator.spec.storage_location
    raise Interrupted(
        f"interrupted; the study keeps its trials and checkpoints. "
        f"Continue with: sweeper resume {redact(location)}"
    )
