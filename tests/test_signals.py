"""Signals sent the way schedulers send them leave every claimed trial accounted for."""

from __future__ import annotations

import os
import signal
import time
from datetime import datetime
from pathlib import Path

import pytest
from optuna.trial import TrialState

from sweeper.store.attrs import TrialInfo
from tests import processes as proc

SPEC = """
[study]
name = "s"
trials = 24
workers = {workers}
seed = 5
heartbeat = 10  # stale only after 20 s: the checks below come well before

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 20
train_sequences = 256
valid_sequences = 32

[training]
epochs = 3
hidden = 8
threads = 1

[search]
unroll = {{ one_of = [10, 20] }}
lr = {{ between = [0.002, 0.02], scale = "log" }}

[stopping]
rule = "none"
"""

STATES = (
    "SELECT t.number, t.state, EXISTS (SELECT 1 FROM trial_user_attributes a "
    "WHERE a.trial_id = t.trial_id AND a.key = 'interrupted') FROM trials t"
)


def _spec(folder: Path, workers: int) -> Path:
    path = folder / "s.toml"
    path.write_text(SPEC.format(workers=workers))
    return path


@pytest.mark.slow  # three launches, about 15 s each
def test_sigterm_to_the_process_group_marks_every_claimed_trial(tmp_path: Path) -> None:
    for attempt in range(3):  # the fault showed in 5 of 5 runs; three runs catch it
        folder = tmp_path / str(attempt)
        folder.mkdir()
        spec = _spec(folder, workers=2)
        db = folder / "runs" / "s.db"
        launcher = proc.start(folder, "run", spec.name, new_group=True)
        proc.wait_for(lambda db=db: proc.epoch_count(db) >= 1, 120, "a first epoch")
        sent = time.monotonic()
        os.killpg(launcher.pid, signal.SIGTERM)
        assert launcher.wait(timeout=30) == 130
        assert time.monotonic() - sent < 10  # long before the 20 s stale-heartbeat time
        rows = proc.query(db, STATES)
        assert not [row for row in rows if row[1] == "RUNNING"], rows
        left = [row for row in rows if row[1] == "FAIL"]
        assert left and all(marked for _n, _s, marked in left), rows


def _running_workers(db: Path, after: datetime | None = None) -> set[str]:
    """The worker names (host:pid:wN) of the trials running now, started after ``after``."""
    if not db.exists() or proc.epoch_count(db) == 0:  # no study to open yet
        return set()
    return {
        TrialInfo.of(t).worker or ""
        for t in proc.trials(db, "s")
        if t.state == TrialState.RUNNING
        and (after is None or (t.datetime_start is not None and t.datetime_start > after))
    } - {""}


def _alive(worker: str) -> bool:
    return Path(f"/proc/{worker.split(':')[1]}").exists()


@pytest.mark.slow  # about 30 s: a pool start and a few dozen short trials
def test_a_worker_signalled_alone_is_replaced(tmp_path: Path) -> None:
    spec = _spec(tmp_path, workers=2)
    db = tmp_path / "runs" / "s.db"
    launcher = proc.start(tmp_path, "run", spec.name, new_group=True)
    try:
        proc.wait_for(lambda: len(_running_workers(db)) == 2, 120, "two running workers")
        victim = sorted(_running_workers(db))[0]
        signalled = datetime.now()
        os.kill(int(victim.split(":")[1]), signal.SIGTERM)

        def two_again() -> bool:
            later = _running_workers(db, after=signalled)
            return len(later) == 2 and all(_alive(worker) for worker in later)

        proc.wait_for(two_again, 30, "two workers running trials started after the signal")
    finally:
        os.killpg(launcher.pid, signal.SIGTERM)
        launcher.wait(timeout=30)
