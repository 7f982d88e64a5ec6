"""The flat export: CSV, JSON and SQLite round trips with exact columns and row counts."""

from __future__ import annotations

import csv
import json
import math
import os
import sqlite3
import stat
from pathlib import Path

import optuna
import pytest
import sqlite_utils
from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution
from optuna.trial import TrialState

from benchmarks.synthetic_study import synthetic_trial
from sweeper.errors import InputError
from sweeper.report.export import export_study
from sweeper.store.connect import open_storage
from sweeper.store.epoch_rows import write_epoch
from sweeper.store.tables import ensure_tables
from sweeper.training.epoch_record import EpochRecord
from tests.conftest import invoke

SPACE = {
    "lr": FloatDistribution(1e-4, 1.0, log=True),
    "hidden": IntDistribution(8, 64),
    "cell": CategoricalDistribution(["gru", "lstm"]),
    "dropout": FloatDistribution(0.0, 0.5),
}
TRIALS = [
    "number", "state", "value", "epochs", "seconds", "worker", "started", "finished",
    "end_reason", "diverged", "retry_of", "seed", "failure_type", "failure_message",
    "param_cell", "param_dropout", "param_hidden", "param_lr",
]  # fmt: skip
EPOCHS = [
    "trial_number", "epoch", "train_loss", "valid_loss", "valid_metric", "grad_norm_mean",
    "grad_norm_median", "grad_norm_p95", "grad_norm_max", "clip_fraction", "nonfinite_steps",
    "steps", "seconds", "sequences_per_second",
]  # fmt: skip


@pytest.fixture
def location(tmp_path: Path) -> str:
    where = str(tmp_path / "study.db")
    storage = open_storage(where, heartbeat=False)
    study = optuna.create_study(study_name="exp", storage=storage)
    lstm = {"lr": 0.01, "hidden": 16, "cell": "lstm", "dropout": 0.1}
    gru = {"lr": 0.2, "hidden": 32, "cell": "gru"}  # dropout is conditional: absent here
    failure = {"type": "OSError", "message": "disk full", "traceback": ""}
    done = {"epochs": 2, "compute_seconds": 3.5, "worker": "h:1", "seed": 11}
    stopped = {"epochs": 1, "diverged": True, "end_reason": "non-finite loss"}
    study.add_trials(
        [
            synthetic_trial(0, value=0.25, params=lstm, distributions=SPACE, user_attrs=done),
            synthetic_trial(
                1,
                state=TrialState.PRUNED,
                value=0.9,
                params=gru,
                distributions=SPACE,
                user_attrs=stopped,
            ),
            synthetic_trial(
                2,
                state=TrialState.FAIL,
                params=gru,
                distributions=SPACE,
                user_attrs={"failure": failure, "retry_of": 0},
            ),
        ]
    )
    ensure_tables(storage.engine)
    for epoch, loss in ((1, 0.5), (2, 0.25)):
        record = EpochRecord(epoch, loss, loss, 0.7, 1.0, 0.9, 2.0, 4.0, 0.25, 0, 10, 1.5, 50.0)
        write_epoch(storage.engine, "exp", 0, record)
    write_epoch(
        storage.engine,
        "exp",
        1,
        EpochRecord(1, math.nan, math.nan, math.nan, *[math.nan] * 4, 0.0, 10, 10, 1.0, 5.0),
    )
    storage.engine.dispose()
    return where


def test_csv_writes_two_files_with_exact_columns(location: str, tmp_path: Path) -> None:
    written = export_study(location, tmp_path / "out" / "run.csv", "csv")
    assert written == [tmp_path / "out" / "run_trials.csv", tmp_path / "out" / "run_epochs.csv"]
    with written[0].open(newline="") as f:
        trials = list(csv.reader(f))
    with written[1].open(newline="") as f:
        epochs = list(csv.reader(f))
    assert trials[0] == TRIALS and len(trials) == 4
    assert epochs[0] == EPOCHS and len(epochs) == 4
    first, pruned, failed = (dict(zip(TRIALS, row, strict=True)) for row in trials[1:])
    assert (first["state"], first["value"], first["param_cell"], first["param_dropout"]) == (
        "finished",  # our word, not the storage library's COMPLETE
        "0.25",
        "lstm",
        "0.1",
    )
    assert (pruned["state"], pruned["diverged"], pruned["param_dropout"]) == (
        "diverged",
        "true",
        "",
    )
    assert (pruned["end_reason"], failed["state"]) == ("non-finite loss", "failed")
    assert (pruned["diverged"], pruned["param_dropout"], pruned["end_reason"]) == (
        "true",
        "",
        "non-finite loss",
    )
    assert (failed["value"], failed["failure_message"], failed["retry_of"]) == (
        "",
        "disk full",
        "0",
    )
    nan_row = dict(zip(EPOCHS, epochs[3], strict=True))
    assert nan_row["valid_loss"] == "" and nan_row["steps"] == "10"


@pytest.mark.parametrize("fmt", ["csv", "json", "sqlite"])
def test_exported_files_get_the_mode_the_umask_gives_new_files(
    location: str, tmp_path: Path, fmt: str
) -> None:
    # POSIX open(2): a new file's mode is 0666 less the umask (here 0644)
    before = os.umask(0o022)
    try:
        written = export_study(location, tmp_path / f"run.{fmt}", fmt)  # type: ignore[arg-type]
    finally:
        os.umask(before)
    assert [stat.S_IMODE(path.stat().st_mode) for path in written] == [0o644] * len(written)


def test_the_export_command_names_the_files_csv_writes(location: str, tmp_path: Path) -> None:
    out = tmp_path / "x.csv"
    result = invoke("export", location, "--format", "csv", "-o", str(out))
    assert result.exit_code == 0, result.output
    assert result.output == (
        f"exported: {tmp_path / 'x_trials.csv'} and {tmp_path / 'x_epochs.csv'} "
        "(csv writes one file per table, named after x.csv)\n"
    )
    assert not out.exists()
    single = invoke("export", location, "--format", "json", "-o", str(tmp_path / "x.json"))
    assert single.output == f"exported: {tmp_path / 'x.json'}\n"
    helped = invoke("export", "--help").output
    assert "x_trials.csv" in helped and "x_epochs.csv" in helped


def test_json_holds_study_trials_and_epochs(location: str, tmp_path: Path) -> None:
    (path,) = export_study(location, tmp_path / "run.json", "json")
    document = json.loads(path.read_text())
    assert document["study"]["name"] == "exp"
    assert document["trial_columns"] == TRIALS and document["epoch_columns"] == EPOCHS
    assert [list(row) for row in document["trials"]] == [TRIALS] * 3
    assert [list(row) for row in document["epochs"]] == [EPOCHS] * 3
    assert document["trials"][1]["param_dropout"] is None
    assert document["trials"][1]["diverged"] is True
    assert document["epochs"][2]["valid_loss"] is None
    assert document["epochs"][1]["valid_loss"] == 0.25


def test_sqlite_has_typed_tables_trials_and_epochs(location: str, tmp_path: Path) -> None:
    (path,) = export_study(location, tmp_path / "run.db", "sqlite")
    db = sqlite_utils.Database(path)
    assert set(db.table_names()) == {"trials", "epochs", "study"}
    assert [c.name for c in db["trials"].columns] == TRIALS
    assert [c.name for c in db["epochs"].columns] == EPOCHS
    assert db["trials"].count == 3 and db["epochs"].count == 3
    types = {c.name: c.type for c in db["trials"].columns}
    assert (types["param_hidden"], types["param_lr"], types["param_cell"]) == (
        "INTEGER",
        "REAL",
        "TEXT",
    )
    rows = list(
        db.query("select number, value, diverged, param_dropout from trials order by number")
    )
    assert rows == [
        {"number": 0, "value": 0.25, "diverged": 0, "param_dropout": 0.1},
        {"number": 1, "value": 0.9, "diverged": 1, "param_dropout": None},
        {"number": 2, "value": None, "diverged": 0, "param_dropout": None},
    ]
    db.close()


def test_sqlite_export_replaces_an_earlier_export(location: str, tmp_path: Path) -> None:
    export_study(location, tmp_path / "run.db", "sqlite")
    (path,) = export_study(location, tmp_path / "run.db", "sqlite")
    with sqlite3.connect(path) as connection:
        assert connection.execute("select count(*) from trials").fetchone() == (3,)


def test_export_refuses_to_overwrite_the_study_or_a_foreign_database(
    location: str, tmp_path: Path
) -> None:
    with pytest.raises(InputError, match="the study database itself"):
        export_study(location, Path(location), "sqlite")
    foreign = tmp_path / "notes.db"
    with sqlite3.connect(foreign) as connection:
        connection.execute("create table notes (text)")
    with pytest.raises(InputError, match=r"already holds other tables \(notes\)"):
        export_study(location, foreign, "sqlite")


def test_an_unknown_format_is_an_input_error(location: str, tmp_path: Path) -> None:
    with pytest.raises(InputError, match="not one of csv, json, sqlite"):
        export_study(location, tmp_path / "x.parquet", "parquet")  # type: ignore[arg-type]
