"""Worker processes: each opens its own storage, claims queued trials and runs them."""

from __future__ import annotations

import math
import os
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

import optuna
from optuna.storages._heartbeat import get_heartbeat_thread
from optuna.trial import TrialState

from sweeper.checks import build_spec_task
from sweeper.runner import TrialContext, failure_attrs, run_trial, worker_name
from sweeper.storage import engine_of, redact
from sweeper.study import (
    budget_of,
    load_existing,
    make_pruner,
    make_sampler,
    quiet_optuna,
    stop_requested,
    tally,
)

IDLE_POLL_SECONDS = 0.25
IDLE_GIVE_UP_SECONDS = 120.0


def default_threads(workers: int) -> int:
    """torch threads per worker: the cores shared out, at least one."""
    return max(1, (os.cpu_count() or 1) // max(1, workers))


@dataclass(frozen=True)
class WorkerSummary:
    worker: str
    trials: int


def work(
    location: str,
    study_name: str,
    worker_index: int,
    threads: int,
    stop_event: threading.Event | None = None,
) -> WorkerSummary:
    """Claim and run queued trials until the budget is met or a stop is requested.

    Runs in a fresh process (or in the launcher for one worker); it opens its own storage after
    it starts, so no database connection ever crosses a fork.
    """
    import torch

    # before any tensor work: thread pools are sized on first use
    previous = torch.get_num_threads()
    torch.set_num_threads(threads)
    try:
        return _work(location, study_name, worker_index, stop_event)
    finally:
        torch.set_num_threads(previous)


def _work(
    location: str, study_name: str, worker_index: int, stop_event: threading.Event | None
) -> WorkerSummary:
    quiet_optuna()
    study, spec = load_existing(location, study_name)
    study.sampler = make_sampler(spec, worker_index, len(study.get_trials(deepcopy=False)))
    study.pruner = make_pruner(spec)
    context = _context(study, spec, worker_index, stop_event)
    done = 0
    idle_since = time.monotonic()
    while stop_requested(study) is None and not (stop_event and stop_event.is_set()):
        trial_id = study._pop_waiting_trial_id()
        if trial_id is None:
            now = tally(study.get_trials(deepcopy=False))
            waited = time.monotonic() - idle_since
            if now.finished >= budget_of(spec) or (
                waited > IDLE_GIVE_UP_SECONDS and not now.running
            ):
                break
            time.sleep(IDLE_POLL_SECONDS)
            continue
        run_claimed(study, trial_id, context)
        done += 1
        idle_since = time.monotonic()
    return WorkerSummary(context.worker, done)


def _context(
    study: optuna.Study, spec, worker_index: int, stop_event: threading.Event | None
) -> TrialContext:
    from sweeper.tasks.objective import load_objective

    context = TrialContext(
        spec=spec,
        engine=engine_of(study),
        study_name=study.study_name,
        worker=worker_name(worker_index),
    )
    if stop_event is not None:
        context.should_stop = stop_event.is_set
    if spec.is_objective_plugin:
        context.objective = load_objective(
            spec.task["function"],
            spec.base_dir,
            spec.source,
            "task.function",
            path=spec.task.get("path", "."),
        )
    else:
        context.task = build_spec_task(spec)
    return context


def run_claimed(study: optuna.Study, trial_id: int, context: TrialContext) -> TrialState:
    """Run one claimed trial under a heartbeat; every outcome ends up in the study."""
    trial = optuna.Trial(study, trial_id)
    started = time.perf_counter()
    value: float | None = None
    with get_heartbeat_thread(trial_id, study._storage):
        try:
            value = run_trial(trial, context)
            state = TrialState.COMPLETE
        except optuna.TrialPruned as stopped:
            state = TrialState.PRUNED
            if "end_reason" not in trial.user_attrs:
                trial.set_user_attr("end_reason", str(stopped) or "stopped early")
        except Exception as error:  # user code failed: record it, keep the study going
            state = TrialState.FAIL
            details = failure_attrs(error)
            details = {key: redact(text) for key, text in details.items()}
            trial.set_user_attr("failure", details)
            trial.set_user_attr("end_reason", f"failed: {details['type']}: {details['message']}")
    wall = time.perf_counter() - started
    trial.set_user_attr("wall_seconds", wall)
    if "compute_seconds" not in trial.user_attrs:
        trial.set_user_attr("compute_seconds", wall)
    if state == TrialState.COMPLETE and (value is None or not math.isfinite(value)):
        trial.set_user_attr("end_reason", f"objective returned {value!r}")
        state, value = TrialState.FAIL, None
    study.tell(trial, value, state=state)
    return state


def run_parallel(
    location: str,
    study_name: str,
    workers: int,
    threads: int,
    on_done: Callable[[], None],
    errors: list[BaseException],
) -> threading.Thread:
    """Start ``workers`` processes through joblib's process backend, from a helper thread."""
    import joblib

    def target() -> None:
        try:
            joblib.Parallel(n_jobs=workers, backend="loky")(
                joblib.delayed(work)(location, study_name, index, threads)
                for index in range(workers)
            )
        except BaseException as error:  # surfaced by the launcher
            errors.append(error)
        finally:
            on_done()

    thread = threading.Thread(target=target, name="sweeper-workers", daemon=True)
    thread.start()
    return thread
