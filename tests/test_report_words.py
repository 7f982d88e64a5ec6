"""The words a user reads: one set of state words everywhere, and the wording fixes of the
summary (baseline verdicts, worker counts, headings, which trials are drawn red)."""

from __future__ import annotations

import json
import re
from datetime import datetime, timedelta
from pathlib import Path

import optuna
import pytest
from optuna.trial import TrialState

from benchmarks.synthetic_study import make_synthetic_study, synthetic_trial
from sweeper.report.collect import build_tables, read_study
from sweeper.report.export import trial_records
from sweeper.report.render import render_page
from sweeper.report.sections_choice import baseline_verdict
from sweeper.report.sections_operations import peak_concurrency, workers_line
from sweeper.report.theme import RED
from sweeper.results.status import status_table
from sweeper.store import trial_words as words
from sweeper.store.connect import open_storage
from sweeper.sweep.progress import snapshot


@pytest.mark.parametrize(
    ("state", "attrs", "word"),
    [
        ("COMPLETE", {}, "finished"),
        ("COMPLETE", {"confirms": True}, "confirmation"),
        ("PRUNED", {}, "stopped early"),
        ("PRUNED", {"diverged": True}, "diverged"),
        ("FAIL", {"diverged": True}, "diverged"),
        ("FAIL", {}, "failed"),
        ("FAIL", {"interrupted": True}, "interrupted"),
        ("RUNNING", {}, "running"),
        ("WAITING", {}, "waiting"),
    ],
)
def test_each_stored_state_has_one_word(state: str, attrs: dict, word: str) -> None:
    assert words.state_word(state, **attrs) == word


def _mixed_trials() -> list[optuna.trial.FrozenTrial]:
    return [
        synthetic_trial(0, value=0.5),
        synthetic_trial(1, value=0.4, user_attrs={"confirms": 0}),
        synthetic_trial(2, state=TrialState.PRUNED, value=0.9),
        synthetic_trial(3, state=TrialState.PRUNED, value=9.0, user_attrs={"diverged": True}),
        synthetic_trial(4, state=TrialState.FAIL),
        synthetic_trial(5, state=TrialState.FAIL, user_attrs={"interrupted": True}),
    ]


def test_export_summary_and_status_use_the_same_words(tmp_path: Path) -> None:
    trials = _mixed_trials()
    expected = ["finished", "confirmation", "stopped early", "diverged", "failed", "interrupted"]
    tables = build_tables("s", "x.db", "minimize", {}, trials, [])
    assert [r["state"] for r in trial_records(tables)] == expected
    storage = open_storage(str(tmp_path / "s.db"), heartbeat=False)
    study = optuna.create_study(study_name="s", storage=storage)
    study.add_trials(trials)
    page = render_page(read_study(str(tmp_path / "s.db")), replicates=2)
    table = page[page.index('<div id="ranked">') :]
    shown = re.findall(r'<td class="state [a-z-]+">([a-z ]+)</td>', table)
    assert sorted(shown) == sorted(expected)
    # the interrupted trial is not listed as a failure on the page, as on the command line
    failures = page[page.index("<h3>Failures</h3>") : page.index("<h3>Interruptions</h3>")]
    assert "#4" in failures and "#5" not in failures
    text = status_table(snapshot(study, budget=6, workers=1))
    header = next(line for line in text.splitlines() if "budget" in line)
    assert [h for h in words.WORDS if h in header] == [
        "finished",
        "stopped early",
        "failed",
        "interrupted",
        "running",
        "waiting",
    ]
    assert "COMPLETE" not in text and "PRUNED" not in text
    line = snapshot(study, budget=6, workers=1).line()
    assert "1 interrupted" in line and "1 failed" in line
    storage.engine.dispose()


def test_the_retries_table_says_which_trial_a_retry_stands_in_for(tmp_path: Path) -> None:
    storage = open_storage(str(tmp_path / "r.db"), heartbeat=False)
    study = optuna.create_study(study_name="r", storage=storage)
    study.add_trial(synthetic_trial(0, state=TrialState.FAIL))
    retry = synthetic_trial(1, value=0.3, user_attrs={"retry_of": 0})
    retry.system_attrs["failed_trial"] = 0
    study.add_trial(retry)
    text = status_table(snapshot(study, budget=1, workers=1))
    assert "retried trials" in text and "in place of trial" in text
    assert "retries trial" not in text
    page = render_page(read_study(str(tmp_path / "r.db")), replicates=2)
    assert '<th scope="col" tabindex="0">in place of trial</th>' in page
    assert "retries trial" not in page
    storage.engine.dispose()


@pytest.mark.parametrize(
    ("measured", "baseline", "lower_better", "verdict"),
    [
        (0.05, 0.2, True, "beats it: 0.15 lower (75%)"),
        (0.3, 0.2, True, "does not beat it: 0.1 higher (50%)"),
        # a small real gain reads in two significant figures, never "0% lower"
        (0.19992, 0.2, True, "beats it: 8e-05 lower (0.04%)"),
        (0.9, 0.5, False, "beats it: 0.4 higher (80%)"),
        (0.2, 0.2, True, "ties the baseline"),
        (1.5, 0.0, True, "does not beat it: 1.5 higher"),
    ],
)
def test_the_baseline_verdict_never_rounds_a_difference_away(
    measured: float, baseline: float, lower_better: bool, verdict: str
) -> None:
    assert baseline_verdict(measured, baseline, lower_better) == verdict


def test_workers_are_counted_at_once_not_by_process() -> None:
    # two workers over three launches: six worker processes, never more than two trials at once
    start = datetime(2024, 5, 1, 9)
    trials = []
    for launch in range(3):
        for worker in range(2):
            for step in range(2):
                begin = start + timedelta(hours=launch, minutes=10 * step)
                trials.append(
                    synthetic_trial(
                        len(trials),
                        value=0.1,
                        start=begin,
                        end=begin + timedelta(minutes=10),
                        user_attrs={"worker": f"host:{100 * launch + worker}:w{worker}"},
                    )
                )
    tables = build_tables("s", "x.db", "minimize", {"workers": 2}, trials, [])
    assert peak_concurrency(tables.trials) == 2
    line = workers_line(tables)
    assert line.startswith("At most 2 trials ran at once (2 workers in the spec); 6 worker")
    assert "seen" not in line


def test_only_diverged_trials_are_drawn_red(tmp_path: Path) -> None:
    make_synthetic_study(str(tmp_path / "s.db"), trials=60, epochs=6, seed=3)
    tables = read_study(str(tmp_path / "s.db"))
    diverged = {t.number for t in tables.trials if t.diverged}
    assert diverged, "the synthetic study has diverged trials"
    page = render_page(tables, replicates=2)
    figures = json.loads(
        re.search(r'id="sweeper-figures">(.*?)</script>', page, re.S).group(1)  # type: ignore[union-attr]
    )
    red_traces = 0
    for name, figure in figures.items():
        for trace in figure["data"]:
            colours = {
                str(trace.get("marker", {}).get("color", "")).lower(),
                str(trace.get("line", {}).get("color", "")).lower(),
            }
            if RED.lower() in colours:
                red_traces += 1
                assert "diverged" in trace.get("name", ""), (name, trace.get("name"))
    assert red_traces >= 3
