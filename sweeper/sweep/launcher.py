"""The launching process: create or continue the study, queue trials, watch the workers."""

from __future__ import annotations

import os
import socket
import threading
from collections.abc import Callable
from dataclasses import dataclass, field

import optuna
from optuna.trial import TrialState

from sweeper.errors import Interrupted, RunFailure, TooManyFailures
from sweeper.seeds import derive_seed
from sweeper.spec.checks import build_spec_task
from sweeper.spec.sections import Spec
from sweeper.store.attrs import StoredBaseline, StudyInfo, TrialInfo, set_stop_request
from sweeper.store.connect import open_storage, redact, storage_url
from sweeper.store.faults import storage_faults_of_study
from sweeper.sweep.cluster import run_on_cluster
from sweeper.sweep.coordinator import Coordinator
from sweeper.sweep.cores import usable_cores
from sweeper.sweep.pool import LocalPool, local_pool
from sweeper.sweep.progress import ProgressDisplay, Snapshot, snapshot
from sweeper.sweep.study import (
    budget_of,
    create_or_continue,
    launch_attrs,
    load_existing,
    quiet_optuna,
    request_stop,
    stop_requested,
)
from sweeper.sweep.workers import (
    default_threads,
    drop_spent_checkpoints,
    in_background,
    install_stop_signals,
    run_parallel,
    work,
)

WATCH_SECONDS = 0.5
STOP_WAIT_SECONDS = 8.0
QUICK_STOP_SECONDS = 3.0  # a worker's stop poll (1 s) and one window


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


def _task_attrs(spec: Spec) -> tuple[StoredBaseline | None, str, str, str]:
    """The task's baseline, name, description and metric name, as the study stores them."""
    if spec.is_objective_plugin:
        return None, "objective", f"objective plugin {spec.task.function}", "value"
    task = build_spec_task(spec)
    baseline = task.baseline()
    stored = StoredBaseline(baseline.value, baseline.measure, baseline.description)
    return stored, task.name, task.describe(), task.metric_name


def open_for_launch(spec: Spec) -> optuna.Study:
    """Create the study, or continue it when the spec matches the stored one."""
    quiet_optuna()
    baseline, task, description, metric_name = _task_attrs(spec)
    storage = open_storage(spec.storage_location)
    launch = launch_attrs(spec, baseline, task, description, metric_name)
    return create_or_continue(storage, spec, launch)


@dataclass(frozen=True)
class Placement:
    """Where the workers run: here (in-process or a local pool), or on a Dask cluster."""

    workers: int
    threads: int
    cluster: str | None = None  # a Dask scheduler address
    joined: bool = False  # a `sweeper worker` that joined a study launched elsewhere
    pool: LocalPool | None = None  # the local processes of two or more workers


def run_sweep(
    spec: Spec,
    display: ProgressDisplay | None = None,
    cluster: str | None = None,
    pool: LocalPool | None = None,
) -> SweepResult:
    """Run the spec's study to its budget with ``spec.study.workers`` workers.

    The first SIGINT or SIGTERM asks every worker to stop at its next window boundary and
    raises Interrupted once they have; a second one raises KeyboardInterrupt at once.
    ``pool``: local worker processes the caller started earlier and closes
    (``sweeper.sweep.pool.local_pool``); when none is given, this makes and closes its own.
    """
    with storage_faults_of_study(spec.storage_location):
        if pool is not None or cluster:
            return _run(spec, display, cluster, pool)
        with local_pool(spec.study.workers) as own:
            return _run(spec, display, cluster, own)


def _run(
    spec: Spec, display: ProgressDisplay | None, cluster: str | None, pool: LocalPool | None
) -> SweepResult:
    study = open_for_launch(spec)
    threads = spec.training.threads or default_threads(spec.study.workers)
    if cluster:  # the cluster's workers bring their own cores
        threads = spec.training.threads or 1
    placement = Placement(spec.study.workers, threads, cluster, pool=pool)
    return _drive(study, spec, placement, display or ProgressDisplay())


def queue_only(spec: Spec) -> SweepResult:
    """Create or continue the study and queue its trials; start no worker here."""
    study = open_for_launch(spec)
    coordinator = Coordinator(study, spec, ProgressDisplay(interval=0))
    try:
        snap = coordinator.step()
    finally:
        coordinator.close()
    return SweepResult(study.study_name, spec.storage_location, snap, coordinator.queued)


def join_sweep(
    location: str,
    display: ProgressDisplay | None = None,
    tell: Callable[[str], None] | None = None,
) -> SweepResult:
    """Work on an existing study from this host until its budget is met (`sweeper worker`).

    Needs no spec file: the spec, telemetry and checkpoints come from the database. A first
    signal stops only this worker; its trial is continued by another worker or on resume.
    ``tell`` receives one line saying how many torch threads this worker uses, and why.
    """
    quiet_optuna()
    study, spec = load_existing(location)
    set_stop_request(study, None)  # joining means: work on it again, as resume does
    threads, why = joiner_threads(study, spec)
    if tell is not None:
        tell(f"worker: {threads} torch thread{'s' if threads > 1 else ''} ({why})")
    with storage_faults_of_study(location):
        return _drive(study, spec, Placement(1, threads, joined=True), display or ProgressDisplay())


def joiner_threads(study: optuna.Study, spec: Spec) -> tuple[int, str]:
    """A joining worker's torch threads: the spec's, or the cores that this host's other
    sweeper workers on the study leave free (at least one); and the reason in words."""
    if spec.training.threads:
        return spec.training.threads, "training.threads in the spec"
    busy, cores = busy_threads_here(study), usable_cores()
    if not busy:
        return default_threads(1), f"all {cores} cores of this host"
    return default_threads(1, busy), f"{busy} of {cores} cores here train other workers' trials"


def busy_threads_here(study: optuna.Study) -> int:
    """Torch threads of the study's running trials whose workers live on this host."""
    host = socket.gethostname()
    busy = 0
    for trial in study.get_trials(deepcopy=False, states=(TrialState.RUNNING,)):
        info = TrialInfo.of(trial)
        worker_host, _, rest = info.worker.rpartition(":")[0].rpartition(":")
        pid = rest if rest.isdigit() else ""
        if worker_host == host and pid and _process_alive(int(pid)):
            busy += info.threads or 1  # threads are recorded once the trial trains
    return busy


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)  # signal 0: only asks whether the process exists
    except ProcessLookupError:
        return False
    except PermissionError:  # another user's process
        return True
    return True


def _drive(
    study: optuna.Study, spec: Spec, placement: Placement, display: ProgressDisplay
) -> SweepResult:
    coordinator = Coordinator(study, spec, display)
    stop = threading.Event()
    restore = install_stop_signals(stop)
    try:
        with display:
            before = coordinator.step().counts
            _watch(coordinator, spec, placement, stop)
            final = snapshot(study, budget_of(coordinator.spec), coordinator.spec.study.workers)
            display.final(final)
    finally:
        coordinator.close()
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
    info = StudyInfo.of(study)
    objective, baseline = info.objective, info.baseline
    against = ""
    if baseline is not None and baseline.measure == objective:
        against = f" (baseline {baseline.value:.5g})"
    params = ", ".join(f"{name}={_short(value)}" for name, value in best.params.items())
    return f"best trial {best.number}: {objective} {best.value:.5g}{against}; {params}"


def _short(value: object) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def _start_workers(
    spec: Spec,
    placement: Placement,
    stop: threading.Event,
    finished: threading.Event,
    errors: list[BaseException],
) -> threading.Thread:
    location, name = storage_url(spec.storage_location), spec.study.name
    if placement.cluster:
        return run_on_cluster(
            placement.cluster,
            location,
            name,
            placement.workers,
            placement.threads,
            finished.set,
            errors,
        )
    if placement.pool is not None:
        pool, threads = placement.pool, placement.threads
        return run_parallel(location, name, pool, threads, finished.set, errors, stop)
    index = derive_seed(socket.gethostname(), os.getpid()) % 10_000 if placement.joined else 0

    # One worker runs in this process (clean tracebacks); the launcher keeps the main thread.
    return in_background(
        lambda: work(location, name, index, placement.threads, stop),
        "sweeper-worker",
        finished.set,
        errors,
    )


def _watch(
    coordinator: Coordinator, spec: Spec, placement: Placement, stop: threading.Event
) -> None:
    finished = threading.Event()
    errors: list[BaseException] = []
    thread = _start_workers(spec, placement, stop, finished, errors)
    try:
        while not finished.wait(WATCH_SECONDS):
            if stop_requested(coordinator.view) is not None:  # a read: never waits to write
                stop.set()  # relayed to the in-process worker (set here or by another host)
            if stop.is_set():
                _stop_workers(coordinator, finished, placement.joined)
            coordinator.step_when_due()
        thread.join(timeout=5)
        if stop.is_set():
            _stop_workers(coordinator, finished, placement.joined)
    except TooManyFailures:
        finished.wait(60)
        raise
    except KeyboardInterrupt:  # a second signal
        _stop_at_once(coordinator, finished, placement)
    if errors:
        error = errors[0]
        if isinstance(error, RunFailure):
            raise error
        raise RunFailure(f"a worker stopped: {type(error).__name__}: {redact(str(error))}")
    coordinator.step()
    drop_spent_checkpoints(coordinator.study, coordinator.spec)


def _stop_at_once(
    coordinator: Coordinator, finished: threading.Event, placement: Placement
) -> None:
    """A second signal: leave within seconds, and stop the local workers with the launcher.

    The first signal's stop request may not be stored yet (two presses of Ctrl-C arrive
    together), so it is stored here; workers that see it mark their trial interrupted at the
    next window boundary. Whatever still runs after a short wait is killed; its trial comes
    back through the stale-heartbeat retry.
    """
    if not placement.joined:
        request_stop(coordinator.study, "interrupted")
    finished.wait(QUICK_STOP_SECONDS)
    if placement.pool is not None:
        placement.pool.kill()
    location = redact(coordinator.spec.storage_location)
    raise Interrupted(f"stopped at once (second signal); continue with: sweeper resume {location}")


def _stop_workers(coordinator: Coordinator, finished: threading.Event, joined: bool) -> None:
    """Ask the workers to stop, wait for them briefly, then leave with exit code 130."""
    location = redact(coordinator.spec.storage_location)
    if joined:  # only this worker stops; the study goes on elsewhere
        finished.wait(STOP_WAIT_SECONDS)
        raise Interrupted(
            "interrupted; this worker's trial will be continued by another worker, or with: "
            f"sweeper resume {location}"
        )
    request_stop(coordinator.study, "interrupted")
    finished.wait(STOP_WAIT_SECONDS)
    raise Interrupted(
        f"interrupted; the study keeps its trials and checkpoints. "
        f"Continue with: sweeper resume {location}"
    )
