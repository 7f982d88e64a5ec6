"""`sweeper status`: the study's table, an ETA only while someone works on it, a stale summary."""

from __future__ import annotations

from pathlib import Path

import pytest

from sweeper.results.status import status_table
from sweeper.results.summary_stamp import read_stamp
from sweeper.sweep.progress import RunningTrial, Snapshot
from sweeper.sweep.study import Tally
from tests.conftest import invoke, write_tiny_spec


def _snapshot(running: int, finished: int, eta_seconds: float, budget: int = 10) -> Snapshot:
    return Snapshot(
        study_name="s",
        budget=budget,
        counts=Tally(complete=finished, pruned=0, failed=0, running=running, waiting=0),
        best_value=0.5,
        best_trial=0,
        running=tuple(RunningTrial(finished + i, 2, 30.0, "h:1") for i in range(running)),
        eta_seconds=eta_seconds,  # what the mean trial time alone predicts
        retries=(),
    )


def _eta_cell(table: str) -> str:
    row = next(line for line in table.splitlines() if "(trial 0)" in line)
    return row.rstrip(" │|").rsplit("│", 1)[1].strip()


@pytest.mark.parametrize(
    ("running", "finished", "seconds", "eta"),
    [
        (2, 4, 150.0, "2m30s"),  # trials running: the estimate stands
        (0, 4, 150.0, "-"),  # budget left but nothing running: nobody works on the study
        (0, 10, 0.0, "0m00s"),  # budget met: nothing left to wait for
    ],
)
def test_the_eta_is_shown_only_while_trials_run(
    running: int, finished: int, seconds: float, eta: str
) -> None:
    assert _eta_cell(status_table(_snapshot(running, finished, seconds))) == eta


def test_status_says_when_the_summary_beside_the_study_misses_finished_trials(
    in_tmp: Path,
) -> None:
    spec = write_tiny_spec(in_tmp, trials=2, epochs=1)
    assert invoke("run", spec.name).exit_code == 0  # the summary goes beside the study
    page = in_tmp / "runs" / "tiny.html"
    assert read_stamp(page) is not None and read_stamp(page).finished == 2  # type: ignore[union-attr]
    current = invoke("status", "runs/tiny.db")
    assert current.exit_code == 0 and "summary" not in current.output
    # more trials, their summary written elsewhere: the one beside the study is now old
    assert (
        invoke("resume", "runs/tiny.db", "--trials", "3", "--report", "other.html").exit_code == 0
    )
    stale = invoke("status", "runs/tiny.db")
    assert stale.exit_code == 0
    last = stale.output.splitlines()[-1]
    assert last.startswith(f"summary at {page} shows 2 of the 3 finished trials (written ")
    assert last.endswith(" UTC); refresh with: sweeper report runs/tiny.db")
    assert invoke("report", "runs/tiny.db").exit_code == 0
    assert "summary" not in invoke("status", "runs/tiny.db").output


def test_the_last_worker_writes_the_summary_as_run_does(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=2, epochs=1)
    assert invoke("run", spec.name, "--workers", "0").exit_code == 0  # queued only
    result = invoke("worker", "runs/tiny.db")
    assert result.exit_code == 0, result.output
    assert result.output.splitlines()[-1] == f"summary: {in_tmp / 'runs' / 'tiny.html'}"
    stamp = read_stamp(in_tmp / "runs" / "tiny.html")
    assert stamp is not None and (stamp.trials, stamp.finished) == (2, 2)
