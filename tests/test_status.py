"""`sweeper status`: the study's table, with an ETA only while someone works on the study."""

from __future__ import annotations

import pytest

from sweeper.results.status import status_table
from sweeper.sweep.progress import RunningTrial, Snapshot
from sweeper.sweep.study import Tally


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
