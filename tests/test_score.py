"""A trial's score from its stored curve: best epoch, last epoch, mean of the last few; the
final fit trains for the score's epochs and shows the held-out score once."""

from __future__ import annotations

import io
import math
import sqlite3
import statistics
from pathlib import Path

import optuna
import pytest
from optuna.trial import TrialState

from sweeper.spec.loading import load_spec
from sweeper.store.connect import open_storage
from sweeper.sweep.launcher import run_sweep
from sweeper.sweep.progress import ProgressDisplay
from sweeper.training.score import score_curve
from tests.conftest import invoke, write_tiny_spec


@pytest.mark.parametrize(
    ("how", "better", "values", "expected"),
    [
        # by hand: the smallest value is 0.2 at epoch 2; a tie (epoch 4) keeps the earlier
        ("best_epoch", "lower", [0.5, 0.2, 0.3, 0.2], (0.2, 2)),
        ("best_epoch", "higher", [0.5, 0.2, 0.9, 0.7], (0.9, 3)),
        ("best_epoch", "lower", [0.5, math.nan, 0.4, math.inf], (0.4, 3)),
        ("last_epoch", "lower", [0.5, 0.2, 0.3], (0.3, 3)),
        ("recent_mean", "lower", [0.9, 0.2, 0.3, 0.4], ((0.2 + 0.3 + 0.4) / 3, 4)),
        ("recent_mean", "lower", [0.6, 0.4], (0.5, 2)),  # fewer epochs than asked for
    ],
)
def test_score_of_a_curve_by_hand(how, better, values, expected) -> None:
    score = score_curve(values, how, better, recent=3)
    assert (score.value, score.epoch) == (pytest.approx(expected[0]), expected[1])


def sweep(spec: Path) -> None:
    """``sweeper run`` without its summary (the part these tests do not read)."""
    run_sweep(load_spec(spec), ProgressDisplay(io.StringIO()))


def stored_curves(db: Path, study: str) -> dict[int, list[float]]:
    """Every trial's validation losses, epoch 1 first, as the study file holds them."""
    with sqlite3.connect(db) as connection:
        rows = connection.execute(
            "SELECT trial_number, valid_loss FROM sweeper_epochs WHERE study_name = ? "
            "ORDER BY trial_number, epoch",
            (study,),
        ).fetchall()
    curves: dict[int, list[float]] = {}
    for trial, value in rows:
        curves.setdefault(trial, []).append(value)
    return curves


def completed(db: Path, study: str) -> list[optuna.trial.FrozenTrial]:
    loaded = optuna.load_study(study_name=study, storage=open_storage(str(db)))
    return [t for t in loaded.get_trials() if t.state == TrialState.COMPLETE]


SCORE_KEYS = {
    "best_epoch": 'score = "best_epoch"\n',
    "last_epoch": 'score = "last_epoch"\n',
    "recent_mean": 'score = "recent_mean"\nrecent_epochs = 2\n',
}


@pytest.mark.parametrize(
    "how", ["best_epoch", pytest.param("last_epoch", marks=pytest.mark.slow), "recent_mean"]
)
def test_each_trials_value_and_epoch_are_what_its_stored_curve_says(in_tmp: Path, how) -> None:
    spec = write_tiny_spec(in_tmp, trials=3, epochs=4, sampler="random")
    spec.write_text(spec.read_text().replace("seed = 3\n", "seed = 3\n" + SCORE_KEYS[how]))
    sweep(spec)
    curves = stored_curves(in_tmp / "runs" / "tiny.db", "tiny")
    trials = completed(in_tmp / "runs" / "tiny.db", "tiny")
    assert len(trials) == 3
    for trial in trials:
        values = curves[trial.number]
        assert len(values) == 4
        if how == "best_epoch":
            expected, epoch = min(values), values.index(min(values)) + 1
        elif how == "last_epoch":
            expected, epoch = values[-1], 4
        else:
            expected, epoch = statistics.fmean(values[-2:]), 4
        assert trial.value == pytest.approx(expected, rel=1e-12)
        assert trial.user_attrs["score_epoch"] == epoch


def test_retrain_trains_for_the_best_epoch_and_shows_the_held_out_score_once(
    in_tmp: Path,
) -> None:
    spec = write_tiny_spec(in_tmp, trials=3, epochs=5)
    # a large learning rate makes late epochs worse than an earlier one on some trials
    text = spec.read_text().replace("0.001, 0.05", "0.05, 0.5")
    spec.write_text(text.replace("seed = 3\n", 'seed = 3\nscore = "best_epoch"\n'))
    sweep(spec)
    storage = open_storage(str(in_tmp / "runs" / "tiny.db"))
    best = optuna.load_study(study_name="tiny", storage=storage).best_trial
    curve = stored_curves(in_tmp / "runs" / "tiny.db", "tiny")[best.number]
    best_epoch = curve.index(min(curve)) + 1
    assert best.user_attrs["score_epoch"] == best_epoch
    result = invoke("best", "runs/tiny.db", "--retrain", "--save", "m.pt")
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert f"for {best_epoch} epochs; the held-out split is scored once, at the end" in (
        result.output
    )
    progress = [line for line in lines if line.startswith("# epoch ")]
    assert [line.split(":")[0] for line in progress] == [
        f"# epoch {e}" for e in range(1, best_epoch + 1)
    ]
    assert all("held" not in line and "metric" not in line for line in progress)
    assert sum("held out" in line or "held-out loss" in line for line in lines) == 1
    held_out = lines.index(next(line for line in lines if line.startswith("# held out")))
    assert held_out > lines.index(progress[-1])  # after training, not during it


class _WorkerDied(BaseException):
    """Stands in for SIGKILL: not an Exception, so no handler records the trial's end."""


RESUMED = """
[study]
name = "r"
trials = 1
seed = 13
score = "recent_mean"
recent_epochs = 4  # all four epochs: two from before the kill, two after

[task]
kind = "adding"
length = 12
train_sequences = 64
valid_sequences = 32

[training]
epochs = 4
hidden = 8
unroll = 6
threads = 1
lr = 0.01

[stopping]
rule = "none"
"""


def test_a_continued_trials_score_counts_the_epochs_from_before_the_kill(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from optuna.storages import RetryHeartbeatStaleTrialCallback

    from sweeper.store import checkpoints
    from sweeper.store.optuna_internals import fail_running, trial_id
    from sweeper.sweep import runner
    from sweeper.sweep.launcher import open_for_launch
    from sweeper.sweep.study import top_up
    from sweeper.sweep.workers import work

    (in_tmp / "r.toml").write_text(RESUMED, encoding="utf-8")
    spec = load_spec(in_tmp / "r.toml")
    study = open_for_launch(spec)
    top_up(study, spec)
    saved = checkpoints.save

    def save_then_die(engine: object, name: str, origin: int, epoch: int, state: dict) -> None:
        saved(engine, name, origin, epoch, state)  # type: ignore[arg-type]
        if epoch == 2:
            raise _WorkerDied

    monkeypatch.setattr(runner.checkpoints, "save", save_then_die)
    with pytest.raises(_WorkerDied):
        work(spec.storage_location, "r", 0, threads=1)
    monkeypatch.setattr(runner.checkpoints, "save", saved)
    # what the coordinator does with a trial whose heartbeat stopped
    assert fail_running(study, trial_id(study.get_trials()[0]))
    RetryHeartbeatStaleTrialCallback(max_retry=3)(study, study.get_trials()[0])
    work(spec.storage_location, "r", 0, threads=1)

    retry = study.get_trials()[1]
    assert retry.state == TrialState.COMPLETE and retry.user_attrs["resumed_from_epoch"] == 2
    curve = stored_curves(in_tmp / "runs" / "r.db", "r")
    before = curve[0]  # the killed trial's two epochs, as it stored them
    assert len(before) == 2 and curve[1][:2] == before and len(curve[1]) == 4
    assert retry.value == pytest.approx(statistics.fmean(curve[1]), rel=1e-12)
    assert retry.user_attrs["score_epoch"] == 4


def test_an_unknown_score_is_one_line_naming_the_key_and_the_choices(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp)
    spec.write_text(spec.read_text().replace("seed = 3\n", 'seed = 3\nscore = "best"\n'))
    checked = invoke("check", spec.name)
    assert checked.exit_code == 2
    assert checked.output == (
        f"sweeper: error: {spec.name}: study.score: must be one of best_epoch, last_epoch, "
        "recent_mean, got 'best'; did you mean 'best_epoch'?\n"
    )


def test_a_study_refuses_a_spec_whose_score_changed(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1)
    assert invoke("run", spec.name, "--report", "t.html").exit_code == 0
    spec.write_text(spec.read_text().replace("seed = 3\n", 'seed = 3\nscore = "best_epoch"\n'))
    again = invoke("run", spec.name, "--report", "t.html")
    assert again.exit_code == 2
    assert "study.score" in again.output
