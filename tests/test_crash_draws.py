"""Killed and quickly resumed sweeps never finish the same configuration twice."""

from __future__ import annotations

import json
import os
import random
import signal
import time
from pathlib import Path

import pytest
from optuna.trial import TrialState

from sweeper.store.attrs import TrialInfo
from tests import processes as proc
from tests.conftest import TINY

FINISHED = (TrialState.COMPLETE, TrialState.PRUNED)
KILLS = 3


def _finished(db: Path) -> int:
    query = "SELECT COUNT(*) FROM trials WHERE state IN ('COMPLETE', 'PRUNED')"
    return int(proc.query(db, query)[0][0])


def _kill_soon_after_progress(tmp_path: Path, db: Path, moments: random.Random) -> None:
    """Two launches at once, then, once one more trial finished, SIGKILL both process groups
    at a random moment of the next trials (a crash: nothing gets to record anything)."""
    before = _finished(db) if db.exists() else 0
    launchers = [proc.start(tmp_path, "run", "crash.toml", new_group=True) for _ in range(2)]
    try:
        proc.wait_for(lambda: _finished(db) > before, 120, "one more finished trial")
        time.sleep(moments.uniform(0.0, 0.6))
    finally:
        for launcher in launchers:
            os.killpg(launcher.pid, signal.SIGKILL)
            launcher.wait(timeout=30)


@pytest.mark.slow
def test_crash_and_resume_loops_never_repeat_a_finished_configuration(tmp_path: Path) -> None:
    spec = TINY.format(name="crash", trials=10, workers=2, epochs=1, sampler="tpe")
    # a short heartbeat, so that a killed trial is soon taken as dead and retried
    (tmp_path / "crash.toml").write_text(spec.replace("seed = 3", "seed = 3\nheartbeat = 1"))
    db = tmp_path / "runs" / "crash.db"
    moments = random.Random(13)
    for _ in range(KILLS):
        _kill_soon_after_progress(tmp_path, db, moments)
    final = proc.run(tmp_path, "run", "crash.toml")
    assert final.returncode == 0, final.stderr
    finished = [t for t in proc.trials(db, "crash") if t.state in FINISHED]
    assert len(finished) >= 10
    drawn = [json.dumps(t.params, sort_keys=True) for t in finished]
    assert len(set(drawn)) == len(drawn), "a finished configuration was run again"
    streams = {TrialInfo.of(t).draw[0] for t in finished if TrialInfo.of(t).draw}
    assert len(streams) > KILLS, "each worker start draws from a stream of its own"
