"""Worker processes: each opens its own storage, claims queued trials and runs them."""

from __future__ import annotations

import contextlib
import functools
import math
import signal
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

import optuna
import torch
from optuna.trial import TrialState

from sweeper.spec.checks import build_spec_task, load_objective_of
from sweeper.spec.sections import Spec
from sweeper.store import checkpoints
from sweeper.store.attrs import (
    StoredFailure,
    TrialInfo,
    record_end,
    record_failure,
    record_interrupted,
    record_wall_seconds,
)
from sweeper.store.connect import engine_of, redact, retry_locked
from sweeper.store.draw_streams import next_stream
from sweeper.store.faults import is_damage, is_disk_full, storage_faults_of_study
from sweeper.store.heartbeat import HeartbeatTiming
from sweeper.store.optuna_internals import (
    claim_waiting_trial,
    heartbeat_thread,
    rdb_storage,
    return_to_queue,
    set_heartbeat,
    trial_id,
)
from sweeper.sweep import confirmation, lease
from sweeper.sweep.cores import share_of_cores
from sweeper.sweep.pool import LocalPool, collector_paused
from sweeper.sweep.runner import (
    TrialContext,
    failure_attrs,
    run_trial,
    worker_name,
)
from sweeper.sweep.study import (
    budget_met,
    claim_exceeds_budget,
    load_existing,
    make_pruner,
    make_sampler,
    quiet_optuna,
    request_stop,
    search_over,
    stop_requested,
    tally,
    work_left,
)
from sweeper.training import compiled_steps
from sweeper.training.trial_run import TrainingInterrupted

IDLE_POLL_SECONDS = 0.1  # a poll takes about 1.5 ms; the last trial's end is seen sooner
IDLE_GIVE_UP_SECONDS = 120.0
# an idle worker's attempts to queue confirmation trials: each is a write (the lease)
CONFIRM_QUEUE_SECONDS = 1.0
STOP_POLL_SECONDS = 1.0
MAX_POOL_RESTARTS = 5


def default_threads(workers: int, busy: int = 0) -> int:
    """torch threads per worker: the cores not ``busy`` with other workers, shared out."""
    return share_of_cores(workers, busy)


@dataclass(frozen=True)
class WorkerSummary:
    worker: str
    trials: int
    signalled: bool = False  # stopped by a signal to its own process, not by the study


def load_trial_machinery() -> None:
    """Load what every trial needs beyond the imports, so that the first one starts at once.

    torch loads torch._dynamo (about 1 s) when it builds its first optimizer, and optuna loads
    alembic (about 0.3 s) when it opens its first storage; throwaway ones pay for that here
    rather than inside the first trial's time. The compiled step loops are built (once per
    machine) or loaded here too, so forked workers inherit them.
    """
    compiled_steps.loaded()
    with collector_paused():
        torch.optim.Adam([torch.zeros(1, requires_grad=True)])
        optuna.storages.RDBStorage("sqlite://").engine.dispose()  # in memory: nothing to share


def work(
    location: str,
    study_name: str,
    worker_index: int,
    threads: int,
    stop_event: threading.Event | None = None,
    own_signals: bool = False,
    watch_requests: bool | None = None,
) -> WorkerSummary:
    """Claim and run queued trials until the budget is met or a stop is requested.

    Runs in a fresh process (or in the launcher for one worker); it opens its own storage after
    it starts, so no database connection ever crosses a fork. ``own_signals``: this process
    is a worker of its own, so its first Ctrl-C or SIGTERM stops at the next window boundary.
    ``watch_requests`` (default: ``own_signals``): poll the study for a stop request; in the
    launcher's own process its coordinator relays them instead.
    """
    # before any tensor work: thread pools are sized on first use
    previous = torch.get_num_threads()
    torch.set_num_threads(threads)
    load_trial_machinery()  # done already, and at once, in a warm pool's process
    stop_event = stop_event or threading.Event()
    restore = install_stop_signals(stop_event) if own_signals else None
    try:
        watch = own_signals if watch_requests is None else watch_requests
        with storage_faults_of_study(location):  # one line, and a plain error to send back
            return _work(location, study_name, worker_index, stop_event, watch)
    finally:
        torch.set_num_threads(previous)
        if restore is not None:
            restore()


def install_stop_signals(stop_event: threading.Event) -> Callable[[], None] | None:
    """First SIGINT/SIGTERM sets ``stop_event``; the second one stops at once."""
    if threading.current_thread() is not threading.main_thread():
        return None

    def handler(signum: int, _frame: object) -> None:
        if stop_event.is_set():
            raise KeyboardInterrupt
        stop_event.set()

    previous = {sig: signal.signal(sig, handler) for sig in (signal.SIGINT, signal.SIGTERM)}

    def restore() -> None:
        for sig, old in previous.items():
            signal.signal(sig, old)

    return restore


def _watch_stop_requests(
    study: optuna.Study, stop_event: threading.Event, done: threading.Event
) -> None:
    """Turn a stop request stored in the study (by the launcher) into ``stop_event``."""

    def poll() -> None:
        while not done.wait(STOP_POLL_SECONDS):
            try:
                if stop_requested(study) is not None:
                    stop_event.set()
            except Exception:  # a storage hiccup must not kill the watcher
                continue

    threading.Thread(target=poll, name="sweeper-stop-watch", daemon=True).start()


def _work(
    location: str,
    study_name: str,
    worker_index: int,
    stop_event: threading.Event,
    watch_requests: bool,
) -> WorkerSummary:
    quiet_optuna()
    study, spec = load_existing(location, study_name)
    set_heartbeat(rdb_storage(study), HeartbeatTiming(spec.study.heartbeat))
    study.sampler = make_sampler(spec, worker_index, next_stream(engine_of(study), study_name))
    study.pruner = make_pruner(spec)
    context = _context(study, spec, worker_index, stop_event)
    done_event = threading.Event()
    if watch_requests:  # in the launcher's process, its coordinator relays stop requests
        _watch_stop_requests(study, stop_event, done_event)
    try:
        done = _claim_and_run(study, spec, context, stop_event)
    except Exception as error:
        if is_disk_full(error):  # every worker stops; nothing here is a trial's fault
            _request_stop_if_possible(study, "disk full")
        elif is_damage(error):
            _request_stop_if_possible(study, "the study file is damaged")
        raise
    finally:
        done_event.set()  # ends the watcher thread
    signalled = stop_event.is_set() and stop_requested(study) is None
    return WorkerSummary(context.worker, done, signalled)


def _request_stop_if_possible(study: optuna.Study, reason: str) -> None:
    """Store a stop request for every worker, unless the storage cannot take even that."""
    with contextlib.suppress(Exception):  # the launcher stops the local workers anyway
        request_stop(study, reason)


def _claim_and_run(
    study: optuna.Study, spec: Spec, context: TrialContext, stop_event: threading.Event
) -> int:
    """Claim and run trials until the budget is met or a stop; the number run."""
    done = 0
    idle_since = time.monotonic()
    queue_tried = -math.inf
    while not stop_event.is_set() and stop_requested(study) is None:
        claimed = retry_locked(lambda: claim_waiting_trial(study))
        if claimed is None:
            trials = study.get_trials(deepcopy=False)
            waited = time.monotonic() - idle_since
            if budget_met(trials, spec) or (waited > IDLE_GIVE_UP_SECONDS and not _busy(trials)):
                break
            if time.monotonic() - queue_tried >= CONFIRM_QUEUE_SECONDS and _confirmation_due(
                trials, spec
            ):
                queue_tried = time.monotonic()
                if queue_confirmations(study, spec, f"{context.worker}:confirmation"):
                    continue  # claim one at once
            time.sleep(IDLE_POLL_SECONDS)
            continue
        if _give_back_if_surplus(study, spec, claimed):
            if budget_met(study.get_trials(deepcopy=False), spec):
                break
            time.sleep(IDLE_POLL_SECONDS)
            continue
        run_claimed(study, claimed, context)
        done += 1
        idle_since = time.monotonic()
    return done


def _confirmation_due(trials: list, spec: Spec) -> bool:
    return search_over(trials, spec) and bool(confirmation.missing(trials, spec))


def queue_confirmations(study: optuna.Study, spec: Spec, holder: str) -> int:
    """Queue the confirmation trials the search's end calls for; the number queued.

    A worker does this itself, so that workers without a launcher (``sweeper worker`` on a
    shared study, or a launcher that died) do not wait for a coordinator. It queues under
    the study's lease, as the coordinator does: whoever takes it reads the trials again and
    queues only what is still missing, so two workers that find the search over at the same
    moment queue each trial once. While a live coordinator holds the lease, this queues
    nothing and the coordinator's next step queues them.
    """
    engine = engine_of(study)
    timing = HeartbeatTiming(spec.study.heartbeat)
    if not lease.acquire(engine, study.study_name, holder, timing.lease_seconds):
        return 0
    try:
        trials = study.get_trials(deepcopy=False)
        if not search_over(trials, spec):
            return 0
        # read again on a retry: the trials queued before the lock error stand for their rounds
        return retry_locked(
            lambda: confirmation.queue_missing(study, spec, study.get_trials(deepcopy=False))
        )
    finally:
        lease.release(engine, study.study_name, holder)


def _busy(trials: list) -> bool:
    now = tally(trials)
    return bool(now.running or now.confirming)


def _give_back_if_surplus(study: optuna.Study, spec: Spec, claimed: int) -> bool:
    """Return a claimed trial to the queue when the budget is already spoken for.

    Happens when a launch lowers the budget below what earlier launches queued, and when
    the next trial would overrun the compute budget.
    """
    trials = study.get_trials(deepcopy=False)
    number = next(t.number for t in trials if trial_id(t) == claimed)
    if not claim_exceeds_budget(trials, number, spec):
        return False
    retry_locked(lambda: return_to_queue(study, claimed))
    return True


def _context(
    study: optuna.Study, spec: Spec, worker_index: int, stop_event: threading.Event
) -> TrialContext:
    context = TrialContext(
        spec=spec,
        engine=engine_of(study),
        study_name=study.study_name,
        worker=worker_name(worker_index),
    )
    context.should_stop = stop_event.is_set
    if spec.is_objective_plugin:
        context.objective = load_objective_of(spec)
    else:
        context.task = build_spec_task(spec)
    return context


def run_claimed(study: optuna.Study, claimed: int, context: TrialContext) -> TrialState:
    """Run one claimed trial under a heartbeat; every outcome ends up in the study."""
    trial = optuna.Trial(study, claimed)
    started = time.perf_counter()
    value: float | None = None
    interrupted = False
    with heartbeat_thread(study, claimed):
        try:
            value = run_trial(trial, context)
            state = TrialState.COMPLETE
        except optuna.TrialPruned as stopped:
            state = TrialState.PRUNED
            if TrialInfo.live(trial).end_reason is None:
                record_end(trial, str(stopped) or "stopped early")
        except TrainingInterrupted as stop:
            # kept as failed with its checkpoint; the next launch queues it again
            state, interrupted = TrialState.FAIL, True
            record_interrupted(trial, stop.epoch)
        except Exception as error:  # user code failed: record it, keep the study going
            if is_disk_full(error) or is_damage(error):  # the storage's fault: nothing to learn
                raise
            state = TrialState.FAIL
            record_failure(trial, _redacted_failure(error))
    record_wall_seconds(trial, time.perf_counter() - started)
    if state == TrialState.COMPLETE and (value is None or not math.isfinite(value)):
        record_end(trial, f"objective returned {value!r}")
        state, value = TrialState.FAIL, None
    retry_locked(lambda: study.tell(trial, value, state=state))
    if not interrupted:
        _drop_checkpoint(study, trial, context)
    return state


def _redacted_failure(error: BaseException) -> StoredFailure:
    details = {key: redact(text) for key, text in failure_attrs(error).items()}
    return StoredFailure(details["type"], details["message"], details["traceback"])


def _drop_checkpoint(study: optuna.Study, trial: optuna.Trial, context: TrialContext) -> None:
    """A finished trial needs no checkpoint, except the best one when the spec keeps it."""
    if context.spec.is_objective_plugin:
        return
    origin = TrialInfo.live(trial).origin
    if not context.spec.study.keep_best_checkpoint:
        checkpoints.drop(context.engine, context.study_name, [origin])
        return
    drop_spent_checkpoints(study, context.spec, also=origin)


def drop_spent_checkpoints(study: optuna.Study, spec: Spec, also: int | None = None) -> None:
    """Drop the checkpoints of every finished trial (and of ``also``'s origin), except the
    best one's when the spec keeps it.

    The launcher calls this when a sweep ends: a worker killed between recording its trial's
    end and dropping the checkpoint leaves one behind.
    """
    if spec.is_objective_plugin:
        return
    try:
        best = study.best_trial
    except ValueError:  # no complete trial yet
        best = None
    keep_best = best is not None and spec.study.keep_best_checkpoint
    keep = TrialInfo.of(best).origin if best is not None and keep_best else None
    finished = {
        TrialInfo.of(t).origin
        for t in study.get_trials(deepcopy=False, states=(TrialState.COMPLETE, TrialState.PRUNED))
    } | ({also} if also is not None else set())
    checkpoints.drop(engine_of(study), study.study_name, sorted(finished - {keep}))


def run_parallel(
    location: str,
    study_name: str,
    pool: LocalPool,
    threads: int,
    on_done: Callable[[], None],
    errors: list[BaseException],
    stop: threading.Event,
) -> threading.Thread:
    """Run one worker on each of the pool's processes, from a helper thread.

    ``stop``: the launcher's own stop; once set, no worker that ends is replaced (a signal
    to the whole process group reaches the workers before the stop request is stored).
    """

    def until_done() -> None:
        try:
            _parallel_until_done(pool, location, study_name, threads, stop)
        finally:
            pool.close()  # the summary can be written while they go away

    return in_background(until_done, "sweeper-workers", on_done, errors)


def in_background(
    action: Callable[[], object],
    name: str,
    on_done: Callable[[], None],
    errors: list[BaseException],
) -> threading.Thread:
    """Run ``action`` in a daemon thread; what it raises is kept in ``errors`` for the caller."""

    def target() -> None:
        try:
            action()
        except BaseException as error:  # surfaced by the launcher
            errors.append(error)
        finally:
            on_done()

    thread = threading.Thread(target=target, name=name, daemon=True)
    thread.start()
    return thread


def _parallel_until_done(
    pool: LocalPool, location: str, study_name: str, threads: int, stop: threading.Event
) -> None:
    """Run the workers; when one dies (killed, out of memory), start the pool again.

    joblib's process pool stops every worker when one of them dies; their trials then look
    stale and come back, from their checkpoints, through the heartbeat retry. A worker that
    stopped because its own process alone was signalled is replaced, so that the sweep keeps
    its parallelism; a study-wide stop request replaces none.
    """
    from joblib.externals.loky.process_executor import TerminatedWorkerError

    call = functools.partial(_pool_work, location, study_name, threads)
    for restart in range(MAX_POOL_RESTARTS + 1):
        try:
            pool.run_each(call, functools.partial(_replace, location, study_name, stop))
            return
        except TerminatedWorkerError:
            if restart == MAX_POOL_RESTARTS:
                raise
            if not _still_to_run(location, study_name):
                return


def _pool_work(location: str, study_name: str, threads: int, index: int) -> WorkerSummary:
    """One pool worker: its own signals stop it, and it watches the study for stop requests."""
    return work(location, study_name, index, threads, None, True)


def _replace(location: str, study_name: str, stop: threading.Event, summary: WorkerSummary) -> bool:
    """Whether a pool worker that has ended needs a replacement."""
    return summary.signalled and not stop.is_set() and _still_to_run(location, study_name)


def _still_to_run(location: str, study_name: str) -> bool:
    """No stop is requested and the budget is not met yet."""
    study, spec = load_existing(location, study_name)
    if stop_requested(study) is not None:
        return False
    return work_left(study.get_trials(deepcopy=False), spec)
