"""The local process pool (joblib's process backend), started before the launcher needs it.

A fresh worker process spends seconds importing torch and the parts torch loads lazily on its
first optimizer. Started as soon as the spec's sections are read, the pool does that while
the launcher checks the spec against its task, imports its own modules and creates the
study, so the workers' first trials start about when an in-process worker's would. This
module stays light (no torch, no joblib at import time) so that the command line can start
the pool before anything heavy loads.
"""

from __future__ import annotations

import contextlib
import gc
import os
import threading
from collections.abc import Iterable, Iterator
from typing import Any

WARM_UP_WAIT_SECONDS = 60.0


def load_trial_machinery() -> int:
    """Load what every trial needs, so that the first one starts at once; returns the pid.

    Besides the imports, torch loads torch._dynamo (about 1 s) when it builds its first
    optimizer; a throwaway one pays for that here rather than inside the first trial's time.
    """
    with collector_paused():
        import torch

        import sweeper.workers  # noqa: F401  (torch, optuna, SQLAlchemy and the trainer)

        torch.optim.Adam([torch.zeros(1, requires_grad=True)])
    return os.getpid()


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
    """The processes of ``workers`` local workers, starting now (none for a single worker)."""
    pool = LocalPool(workers).start() if workers > 1 else None
    try:
        yield pool
    finally:
        if pool is not None:
            pool.close()


class LocalPool:
    """``size`` worker processes of joblib's process backend, warmed up in the background."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._warm_up = threading.Thread(target=self._start, name="sweeper-pool-start", daemon=True)
        self._lock = threading.Lock()
        self._closed = False
        self._busy = False  # workers are running trials: never kill them then

    def __repr__(self) -> str:
        return f"LocalPool(size={self.size})"

    def start(self) -> LocalPool:
        self._warm_up.start()
        return self

    def run(self, calls: Iterable[Any]) -> list[Any]:
        """Run joblib's delayed ``calls`` on the pool's processes; their results in order."""
        import joblib

        if self._warm_up.is_alive():
            self._warm_up.join(WARM_UP_WAIT_SECONDS)
        self._busy = True
        try:
            return list(joblib.Parallel(n_jobs=self.size, backend="loky")(calls))
        finally:
            self._busy = False

    def close(self) -> None:
        """Stop idle worker processes now rather than at the interpreter's exit.

        Stopping them politely would wait for each one to tear down its torch (about a second)
        while the launcher could be writing the summary. Workers still busy (a stop request in
        progress) are left to finish; the interpreter's exit waits for them.
        """
        with self._lock:  # after this, the warm-up has made its processes or never will
            if self._closed:
                return
            self._closed = True
        executor = _current_executor()
        if executor is not None:
            executor.shutdown(wait=False, kill_workers=not self._busy)

    def _start(self) -> None:
        import joblib

        with self._lock:
            if self._closed:
                return
            # entering makes the executor and its processes; joblib keeps it for the next
            # call of the same size, which is `run`'s
            parallel = joblib.Parallel(n_jobs=self.size, backend="loky").__enter__()
        try:
            parallel(joblib.delayed(load_trial_machinery)() for _ in range(self.size))
        except Exception:  # a failed warm-up only costs time; `run` reports real failures
            pass
        finally:
            parallel.__exit__(None, None, None)


def _current_executor() -> Any:
    """The process executor joblib's loky backend reuses across calls, if one is running.

    joblib has no public handle on it, and asking loky for "the" executor with other
    arguments would replace it with a new one, so read loky's module-level reference.
    """
    from joblib.externals.loky import reusable_executor

    return getattr(reusable_executor, "_executor", None)
