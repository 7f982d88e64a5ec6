"""`sweeper replay STUDY TRIAL`: retrain a trial from its parameters and seed, compare exactly."""

from __future__ import annotations

import json
import math
import sqlite3
from pathlib import Path

import optuna
import pytest
from optuna.trial import TrialState

from sweeper.seeds import trial_seed
from sweeper.store.connect import open_storage
from sweeper.training import compiled_steps
from sweeper.training.numerics import (
    COMPILED,
    SWITCH,
    TORCH_MODULES,
    WINDOW,
    current_revision,
)
from tests.conftest import invoke, write_tiny_spec

DEMO = Path(__file__).resolve().parents[1] / "search_spaces" / "adding_lstm_demo.toml"


def tiny_study(folder: Path, trials: int = 2, cell: str = "lstm") -> Path:
    spec = write_tiny_spec(folder, trials=trials, epochs=3, extra="")
    training = f'batch = 32\nthreads = 1\ncell = "{cell}"'
    spec.write_text(spec.read_text().replace("batch = 32", training))
    result = invoke("run", spec.name, "--report", "tiny.html")
    assert result.exit_code == 0, result.output
    return folder / "runs" / "tiny.db"


def study_of(db: Path, name: str) -> optuna.Study:
    return optuna.load_study(study_name=name, storage=open_storage(str(db)))


def test_a_trial_of_the_demo_study_replays_exactly(in_tmp: Path) -> None:
    db = in_tmp / "demo.db"
    ran = invoke("run", str(DEMO), "--trials", "2", "--storage", str(db), "--report", "x.html")
    assert ran.exit_code == 0, ran.output
    result = invoke("replay", str(db), "1")
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    seed = study_of(db, "adding-lstm-demo").trials[1].user_attrs["seed"]
    assert lines[0] == (
        f"replay of trial 1 in 'adding-lstm-demo': seed {seed}, 10 epochs, 1 torch thread, "
        f"trainer {current_revision()}"
    )
    assert lines[1].split() == ["epoch", "measure", "recorded", "replayed"]
    assert lines[-1] == "agree: the replay matches the record exactly (10 epochs, 10 values each)"
    assert len(lines) == 2 + 10 * 4 + 1


def test_each_epoch_shows_recorded_and_replayed_values(in_tmp: Path) -> None:
    db = tiny_study(in_tmp)
    result = invoke("replay", str(db), "0")
    assert result.exit_code == 0, result.output
    with sqlite3.connect(db) as connection:
        losses = connection.execute(
            "SELECT epoch, train_loss FROM sweeper_epochs WHERE trial_number = 0 ORDER BY epoch"
        ).fetchall()
    for epoch, loss in losses:
        (row,) = [
            line
            for line in result.output.splitlines()
            if line.split()[:2] == [str(epoch), "train_loss"]
        ]
        assert row.split()[2:] == [repr(loss), repr(loss), "same"]


def test_a_changed_record_is_reported_and_exits_1(in_tmp: Path) -> None:
    db = tiny_study(in_tmp)
    with sqlite3.connect(db) as connection:
        connection.execute(
            "UPDATE sweeper_epochs SET grad_norm_max = grad_norm_max * (1 + 1e-12) "
            "WHERE trial_number = 1 AND epoch = 2"
        )
    result = invoke("replay", str(db), "1")
    assert result.exit_code == 1
    assert "grad_norm_max" in result.output and "DIFFERS" in result.output
    assert result.output.splitlines()[-1] == (
        "differ: 1 of 3 epochs disagree; the first is epoch 2 (grad_norm_max)"
    )


def test_a_continued_trial_replays_with_its_origins_seed(in_tmp: Path) -> None:
    db = tiny_study(in_tmp, trials=1)
    study = study_of(db, "tiny")
    first = study.trials[0]
    # trial 1: interrupted before its first epoch; the next launch continues it as trial 2
    study.add_trial(
        optuna.create_trial(
            state=TrialState.FAIL,
            params=first.params,
            distributions=first.distributions,
            user_attrs={"interrupted": True},
        )
    )
    again = invoke("run", "tiny.toml", "--trials", "2", "--report", "tiny.html")
    assert again.exit_code == 0, again.output
    retry = study_of(db, "tiny").trials[2]
    assert retry.state == TrialState.COMPLETE and retry.user_attrs["retry_of"] == 1
    assert retry.user_attrs["seed"] == trial_seed(3, 1) != trial_seed(3, 2)
    result = invoke("replay", str(db), "2")
    assert result.exit_code == 0, result.output
    assert f"seed {trial_seed(3, 1)}," in result.output.splitlines()[0]


def test_unknown_or_untrained_trials_exit_2(in_tmp: Path) -> None:
    db = tiny_study(in_tmp)
    missing = invoke("replay", str(db), "9")
    assert missing.exit_code == 2
    assert "sweeper: error: study 'tiny' has no trial 9 (trials: 0 to 1)" in missing.output
    study = study_of(db, "tiny")
    study.add_trial(optuna.create_trial(state=TrialState.FAIL))
    untrained = invoke("replay", str(db), "2")
    assert untrained.exit_code == 2 and "never started training" in untrained.output
    assert invoke("replay", str(in_tmp / "nothing.db"), "0").exit_code == 2


def test_objective_plugin_studies_cannot_be_replayed(in_tmp: Path) -> None:
    (in_tmp / "replay_bowl.py").write_text(
        "def score(params, report):\n    return (params['x'] - 1) ** 2\n", encoding="utf-8"
    )
    spec = in_tmp / "bowl.toml"
    spec.write_text(
        '[study]\nname = "bowl"\ntrials = 2\n\n'
        "[confirm]\nconfigurations = 0\n"
        '[task]\nkind = "objective"\n'
        'function = "replay_bowl:score"\n\n[search]\nx = { between = [-2.0, 2.0] }\n',
        encoding="utf-8",
    )
    assert invoke("run", spec.name, "--report", "b.html").exit_code == 0
    result = invoke("replay", "runs/bowl.db", "0")
    assert result.exit_code == 2 and "objective plugin" in result.output


def test_a_replay_that_diverges_early_still_compares_every_recorded_epoch(in_tmp: Path) -> None:
    db = tiny_study(in_tmp)
    with sqlite3.connect(db) as connection:
        (stored,) = connection.execute(
            "SELECT value_json FROM trial_user_attributes WHERE trial_id = "
            "(SELECT trial_id FROM trials WHERE number = 0) AND key = 'training'"
        ).fetchone()
        training = {**json.loads(stored), "optimizer": "sgd", "lr": 1e12, "momentum": 0.9}
        training["clip"] = 0.0
        connection.execute(
            "UPDATE trial_user_attributes SET value_json = ? WHERE key = 'training' AND "
            "trial_id = (SELECT trial_id FROM trials WHERE number = 0)",
            (json.dumps(training),),
        )
    result = invoke("replay", str(db), "0")
    assert result.exit_code == 1
    lines = result.output.splitlines()
    rows = [line.split() for line in lines]
    assert [row[0] for row in rows if row[1:2] == ["train_loss"]] == ["1", "2", "3"]
    first_valid = next(row for row in rows if row[:1] == ["valid_loss"])
    assert not math.isfinite(float(first_valid[2]))  # the replay diverged in its first epoch
    assert lines[-1].startswith("differ: 3 of 3 epochs disagree; the first is epoch 1 (")


def _set_trainer(db: Path, number: int, revision: str | None) -> None:
    """Rewrite (or, with None, drop) the trainer revision a trial recorded."""
    trial = f"(SELECT trial_id FROM trials WHERE number = {number})"
    with sqlite3.connect(db) as connection:
        if revision is None:
            connection.execute(
                f"DELETE FROM trial_user_attributes WHERE key = 'trainer' AND trial_id = {trial}"
            )
        else:
            connection.execute(
                "UPDATE trial_user_attributes SET value_json = ? "
                f"WHERE key = 'trainer' AND trial_id = {trial}",
                (json.dumps(revision),),
            )


@pytest.mark.parametrize("cell", ["gru", "elman"])
def test_a_trial_trained_before_the_revision_was_recorded_replays_exactly(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch, cell: str
) -> None:
    # trained through torch's nn.GRU / nn.RNN, as every trial was before our recurrence
    monkeypatch.setenv(SWITCH, "torch")
    db = tiny_study(in_tmp, trials=1, cell=cell)
    monkeypatch.delenv(SWITCH)
    assert study_of(db, "tiny").trials[0].user_attrs["trainer"] == TORCH_MODULES
    _set_trainer(db, 0, None)  # as an older sweeper stored it: no revision
    old = invoke("replay", str(db), "0")
    assert old.exit_code == 0, old.output
    assert old.output.splitlines()[0].endswith(f"trainer {TORCH_MODULES}")
    assert old.output.splitlines()[-1].startswith("agree: the replay matches the record exactly")


@pytest.mark.parametrize("asked", ["", WINDOW])
def test_a_new_trial_records_its_revision_and_replays_exactly(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch, asked: str
) -> None:
    # the latest revision this machine runs (window-2 with a compiler), and window-1 when asked
    if asked:
        monkeypatch.setenv(SWITCH, asked)
    db = tiny_study(in_tmp, trials=1, cell="gru")
    monkeypatch.delenv(SWITCH, raising=False)
    assert study_of(db, "tiny").trials[0].user_attrs["trainer"] == (asked or current_revision())
    result = invoke("replay", str(db), "0")
    assert result.exit_code == 0, result.output
    assert result.output.splitlines()[-1].startswith("agree: the replay matches")


def test_a_compiled_trial_where_nothing_can_build_the_kernels_exits_2(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    db = tiny_study(in_tmp, trials=1, cell="gru")
    _set_trainer(db, 0, COMPILED)
    monkeypatch.setattr(compiled_steps, "_load", lambda: (None, "no C++ compiler (test)"))
    result = invoke("replay", str(db), "0")
    assert result.exit_code == 2
    assert result.output.strip().splitlines()[-1] == (
        "sweeper: error: trial 0 of 'tiny': trainer revision window-2 needs the compiled "
        "step loops, "
        "which this machine cannot build (no C++ compiler (test)); install a C++ compiler "
        "(g++ or clang++, or set CXX) to build them"
    )


def test_a_revision_this_sweeper_lacks_exits_2(in_tmp: Path) -> None:
    db = tiny_study(in_tmp, trials=1)
    _set_trainer(db, 0, "window-99")
    result = invoke("replay", str(db), "0")
    assert result.exit_code == 2
    assert "trainer revision 'window-99', which this sweeper does not have" in result.output
