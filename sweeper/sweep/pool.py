"""The local process pool: joblib's process backend, its processes forked from a loaded server.

A fresh Python process spends seconds importing torch, and torch loads more (torch._dynamo)
on its first optimizer. The pool's workers therefore do not start from nothing: a fork server
starts as soon as the spec's sections are read, loads all of that once while the launcher
checks the spec and creates the study, and every worker process is forked from it with
everything loaded. Two workers start about as soon as one in-process worker does.

This module stays light (no torch, no joblib at import time) so that the command line can
start the server before anything heavy loads.
"""

from __future__ import annotations

import contextlib
import gc
import multiprocessing
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import FIRST_COMPLETED, Future, wait
from typing import Any

PRELOAD_MODULE = "sweeper.sweep.worker_preload"
# POSIX only; elsewhere loky starts each worker from scratch (seconds later)
FORK_SERVER = "forkserver" in multiprocessing.get_all_start_methods()


@contextlib.contextmanager
def collector_paused() -> Iterator[None]:
    """No garbage collection while modules load: they make many objects but little garbage,
    and the collector would walk all of them again and again (imports take ~15% longer)."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


@contextlib.contextmanager
def local_pool(workers: int) -> Iterator[LocalPool | None]:
    """The pool of ``workers`` local workers, starting now (none for a single worker)."""
    pool = LocalPool(workers).start() if workers > 1 else None
    try:
        yield pool
    finally:
        if pool is not None:
            pool.close()


class LocalPool:
    """``size`` worker processes of joblib's process backend, forked from a loaded server."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._closed = False
        self._busy = False  # workers are running trials: never kill them then

    def __repr__(self) -> str:
        return f"LocalPool(size={self.size})"

    def start(self) -> LocalPool:
        """Start the fork server (if this process has none yet); it loads in the background."""
        if not FORK_SERVER:
            return self
        context = multiprocessing.get_context("forkserver")
        context.set_forkserver_preload([PRELOAD_MODULE])
        from multiprocessing import forkserver

        forkserver.ensure_running()  # spawns the server and returns; it loads meanwhile
        return self

    def run(self, calls: Iterable[Any]) -> list[Any]:
        """Run joblib's delayed ``calls`` on the pool's processes; their results in order."""
        import joblib

        # the executor keeps the start method it was made with
        with _loky_start_method("forkserver") if FORK_SERVER else contextlib.nullcontext():
            parallel = joblib.Parallel(n_jobs=self.size, backend="loky").__enter__()
        self._busy = True
        try:
            return list(parallel(calls))
        finally:
            self._busy = False
            parallel.__exit__(None, None, None)

    def run_each(self, call: Callable[[int], Any], again: Callable[[Any], bool]) -> None:
        """Run ``call(index)`` once per process index; run an index again each time its result
        satisfies ``again``, so the pool keeps its size when one call ends early.

        ``call`` must be picklable (a module-level function or a partial of one). What a call
        raises, a worker process dying included, is raised here.
        """
        executor = self._executor()
        self._busy = True
        try:
            running: dict[Future[Any], int] = {
                executor.submit(call, index): index for index in range(self.size)
            }
            while running:
                done, _ = wait(running, return_when=FIRST_COMPLETED)
                for future in done:
                    index = running.pop(future)
                    if again(future.result()):
                        running[executor.submit(call, index)] = index
        finally:
            self._busy = False

    def _executor(self) -> Any:
        """joblib's process executor for ``size`` workers, set up as ``run`` sets it up."""
        import joblib

        with _loky_start_method("forkserver") if FORK_SERVER else contextlib.nullcontext():
            joblib.Parallel(n_jobs=self.size, backend="loky").__enter__()
        return _current_executor()

    def kill(self) -> None:
        """Kill every worker process now, busy or not (the launcher is leaving at once)."""
        self._busy = False
        self.close()

    def close(self) -> None:
        """Stop idle worker processes now rather than at the interpreter's exit.

        Stopping them politely would wait for each one to tear down its torch (about a second)
        while the launcher could be writing the summary. Workers still busy (a stop request in
        progress) are left to finish; the interpreter's exit waits for them. The fork server
        stays for the next pool and exits with this process.
        """
        if self._closed:
            return
        self._closed = True
        executor = _current_executor()
        if executor is not None:
            executor.shutdown(wait=False, kill_workers=not self._busy)


@contextlib.contextmanager
def _loky_start_method(method: str) -> Iterator[None]:
    from joblib.externals.loky.backend import context

    previous = context.get_start_method()
    context.set_start_method(method, force=True)
    try:
        yield
    finally:
        context.set_start_method(previous, force=True)


def _current_executor() -> Any:
    """The process executor joblib's loky backend reuses across calls, if one is running.

    joblib has no public handle on it, and asking loky for "the" executor with other
    arguments would replace it with a new one, so read loky's module-level reference.
    """
    from joblib.externals.loky import reusable_executor

    return getattr(reusable_executor, "_executor", None)
