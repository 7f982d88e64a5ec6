"""The launcher's coordinator steps often only while a worker may be waiting for a trial."""

from __future__ import annotations

import sqlite3
import threading
import time
from pathlib import Path

import pytest

from sweeper.spec.loading import load_spec
from sweeper.sweep import coordinator as coordinating
from sweeper.sweep.coordinator import Coordinator, _queue_short
from sweeper.sweep.launcher import open_for_launch
from sweeper.sweep.progress import ProgressDisplay, Snapshot
from sweeper.sweep.study import Tally
from tests.conftest import write_tiny_spec


def _snapshot(budget: int, finished: int, running: int, waiting: int) -> Snapshot:
    counts = Tally(complete=finished, pruned=0, failed=0, running=running, waiting=waiting)
    return Snapshot("s", budget, counts, None, None, (), None, ())


@pytest.mark.parametrize(
    ("budget", "finished", "running", "waiting", "short"),
    [
        (16, 0, 0, 16, False),  # a trial budget is queued whole
        (16, 6, 2, 8, False),
        (16, 14, 2, 0, False),  # the last trials run; nothing left to queue
        (16, 16, 0, 0, False),
        (16, 3, 2, 0, True),  # a compute budget queues one trial per worker at a time
        (16, 3, 1, 1, True),
    ],
)
def test_short_queue(budget: int, finished: int, running: int, waiting: int, short: bool) -> None:
    assert _queue_short(_snapshot(budget, finished, running, waiting), workers=2) == short


def test_no_step_before_it_is_due(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch, storage_location: str
) -> None:
    spec = load_spec(write_tiny_spec(in_tmp, trials=3, epochs=1))
    spec = spec.with_overrides(storage=storage_location)
    coordinator = Coordinator(open_for_launch(spec), spec, ProgressDisplay(interval=0))
    try:
        assert coordinator.step().counts.waiting == 3
        steps: list[int] = []
        monkeypatch.setattr(coordinator, "step", lambda: steps.append(1))
        coordinator.step_when_due()
        assert steps == []
        later = coordinating.time.monotonic() + coordinating.STEP_SECONDS
        monkeypatch.setattr(coordinating.time, "monotonic", lambda: later)
        coordinator.step_when_due()
        assert steps == [1]
    finally:
        coordinator.close()


class _Recording(ProgressDisplay):
    def __init__(self) -> None:
        super().__init__(interval=0)
        self.shown: list[Snapshot] = []

    def update(self, snap: Snapshot) -> None:
        self.shown.append(snap)


def test_the_display_never_waits_for_the_write_lock(in_tmp: Path) -> None:
    """Many busy workers hold SQLite's write lock most of the time; the launcher's display
    must still move (it froze at 0 finished while 17 trials finished)."""
    spec = load_spec(write_tiny_spec(in_tmp, trials=3, epochs=1))
    display = _Recording()
    coordinator = Coordinator(open_for_launch(spec), spec, display)
    locker = sqlite3.connect(in_tmp / "runs" / "tiny.db", isolation_level=None)
    locker.execute("BEGIN IMMEDIATE")  # as a worker writing its epoch
    stepping = threading.Thread(target=coordinator.step)
    try:
        stepping.start()
        deadline = time.monotonic() + 10
        while not display.shown and time.monotonic() < deadline:
            time.sleep(0.05)
        assert display.shown and stepping.is_alive()  # shown while the step waits to write
    finally:
        locker.rollback()
        stepping.join(60)
        coordinator.close()
        locker.close()
    assert display.shown[-1].counts.waiting == 3  # once written, the queued trials show
