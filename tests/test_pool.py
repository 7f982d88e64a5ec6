"""The local pool: warmed-up processes run the workers, and go away when told."""

from __future__ import annotations

import gc
import os
import sys
import time
from pathlib import Path

import joblib
import pytest

from sweeper.sweep import pool as pool_module
from sweeper.sweep.pool import LocalPool, _current_executor, collector_paused, local_pool


def _loaded_before_any_trial() -> tuple[int, int, bool, bool]:
    """In a pool process: its pid, its parent's, and whether the trainer and torch's lazily
    loaded parts are in."""
    loaded = "sweeper.training.trial_run" in sys.modules, "torch._dynamo" in sys.modules
    time.sleep(0.5)  # busy long enough that the other process takes the other call
    return (os.getpid(), os.getppid(), *loaded)


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


def test_workers_are_forked_from_a_server_that_loaded_everything() -> None:
    pool = LocalPool(2).start()
    try:
        found = pool.run(joblib.delayed(_loaded_before_any_trial)() for _ in range(2))
    finally:
        pool.close()
    pids = [pid for pid, _parent, _trainer, _lazy in found]
    assert len(set(pids)) == 2 and os.getpid() not in pids
    for _pid, parent, trainer, lazy_torch in found:
        assert trainer and lazy_torch
        assert "forkserver" in Path(f"/proc/{parent}/cmdline").read_text()
    assert _wait_until_gone(pids)  # closed once their work was done


def test_without_a_fork_server_loky_starts_the_workers(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(pool_module, "FORK_SERVER", False)  # as on Windows
    pool = LocalPool(2).start()
    try:
        found = pool.run(joblib.delayed(_loaded_before_any_trial)() for _ in range(2))
    finally:
        pool.close()
    assert [parent for _pid, parent, _trainer, _lazy in found] == [os.getpid()] * 2


def test_a_pool_closed_before_it_ran_leaves_no_worker() -> None:
    before = _current_executor()
    pool = LocalPool(2).start()
    pool.close()
    pool.close()  # a second close does nothing
    assert _current_executor() is before  # no worker process was made


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
