"""Many workers on one SQLite file: nobody dies on a locked database."""

from __future__ import annotations

from pathlib import Path

import pytest
from optuna.trial import TrialState

from tests import processes as proc

PLUGIN = """
import math

def wave(params, report):
    value = math.sin(5 * params["x"]) + params["x"] ** 2
    report(1, value)
    return value
"""

SPEC = """
[study]
name = "many"
trials = 200
workers = 8
seed = 2
sampler = "random"

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "objective"
function = "waves:wave"

[search]
x = { between = [-2.0, 2.0] }

[stopping]
rule = "none"  # every trial must complete
"""


@pytest.mark.slow  # 8 worker processes on 2 cores
def test_eight_workers_two_hundred_short_trials(tmp_path: Path) -> None:
    (tmp_path / "waves.py").write_text(PLUGIN)
    (tmp_path / "many.toml").write_text(SPEC)
    result = proc.run(tmp_path, "run", "many.toml", timeout=400)
    assert result.returncode == 0, result.stderr[-2000:]
    assert "locked" not in result.stderr
    trials = proc.trials(tmp_path / "runs" / "many.db", "many")
    assert len(trials) == 200
    assert all(t.state == TrialState.COMPLETE for t in trials)
    assert len({t.user_attrs["worker"] for t in trials}) == 8
    assert proc.query(tmp_path / "runs" / "many.db", "PRAGMA integrity_check") == [("ok",)]
