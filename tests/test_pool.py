"""The local pool: warmed-up processes run the workers, and go away when told."""

from __future__ import annotations

import gc
import os
import sys
import time
from pathlib import Path

import joblib
import pytest

from sweeper.pool import LocalPool, _current_executor, collector_paused, local_pool


def _loaded_before_any_trial() -> tuple[int, bool, bool]:
    """In a pool process: its pid, and whether the trainer and torch's lazy parts are in."""
    return os.getpid(), "sweeper.train" in sys.modules, "torch._dynamo" in sys.modules


def _gone(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/status").read_text()
    except FileNotFoundError:
        return True
    return "\nState:\tZ" in state  # killed, not yet reaped


def _wait_until_gone(pids: list[int], seconds: float = 20.0) -> bool:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if all(_gone(pid) for pid in pids):
            return True
        time.sleep(0.05)
    return False


def test_workers_run_in_processes_that_loaded_everything_beforehand() -> None:
    pool = LocalPool(2).start()
    try:
        found = pool.run(joblib.delayed(_loaded_before_any_trial)() for _ in range(2))
    finally:
        pool.close()
    assert all(trainer and lazy_torch for _pid, trainer, lazy_torch in found), found
    assert all(pid != os.getpid() for pid, _trainer, _lazy in found)
    assert _wait_until_gone([pid for pid, _trainer, _lazy in found])


def test_closing_during_warm_up_leaves_no_process() -> None:
    pool = LocalPool(2).start()
    pids = _pool_pids(2)  # started, still importing torch
    pool.close()
    pool.close()  # a second close does nothing
    assert _wait_until_gone(pids)


def _pool_pids(count: int, seconds: float = 20.0) -> list[int]:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        executor = _current_executor()
        processes = getattr(executor, "_processes", None) or {}
        if len(processes) == count:
            return list(processes)
        time.sleep(0.01)
    raise AssertionError("the pool started no processes")


def test_one_worker_needs_no_pool() -> None:
    with local_pool(1) as pool:
        assert pool is None


@pytest.mark.parametrize("enabled_before", [True, False])
def test_collector_is_paused_and_then_left_as_it_was(enabled_before: bool) -> None:
    was = gc.isenabled()
    try:
        if not enabled_before:
            gc.disable()
        with collector_paused():
            assert not gc.isenabled()
        assert gc.isenabled() == enabled_before
    finally:
        if was:
            gc.enable()
