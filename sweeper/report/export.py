"""Flat export of a study: one row per trial and one row per epoch, as CSV, JSON or SQLite.

Trial columns, in order: ``TRIAL_COLUMNS`` followed by one ``param_<name>`` column per searched
parameter (sorted by name; empty where a trial did not set it). Epoch columns:
``EPOCH_COLUMNS``. Missing and non-finite numbers are empty in CSV, ``null`` in JSON and NULL
in SQLite; booleans are ``true``/``false`` in CSV and JSON and 1/0 in SQLite. Failure messages
and every other stored string are exported with storage passwords redacted.
"""

from __future__ import annotations

import csv
import json
import math
import os
import sqlite3
from collections.abc import Callable, Iterator, Sequence
from contextlib import closing, contextmanager
from pathlib import Path
from typing import Any, Literal

import sqlite_utils

from sweeper.errors import InputError
from sweeper.report.collect import ParamInfo, StudyTables, TrialRow, read_study
from sweeper.report.new_file import create_beside
from sweeper.store.connect import sqlite_path, storage_url
from sweeper.training.epoch_record import EPOCH_FIELDS

Format = Literal["csv", "json", "sqlite"]
TRIAL_COLUMNS = (
    "number",
    "state",
    "value",
    "epochs",
    "seconds",
    "worker",
    "started",
    "finished",
    "end_reason",
    "diverged",
    "retry_of",
    "seed",
    "failure_type",
    "failure_message",
)
TRIAL_TYPES: dict[str, type] = {
    "number": int,
    "value": float,
    "epochs": int,
    "seconds": float,
    "diverged": int,
    "retry_of": int,
    "seed": int,
}
EPOCH_COLUMNS = ("trial_number", *EPOCH_FIELDS)
EPOCH_INTEGERS = ("trial_number", "epoch", "nonfinite_steps", "steps")
EXPORT_TABLES = {"trials", "epochs", "study"}


def export_study(
    location: str, output: Path, fmt: Format, study_name: str | None = None
) -> list[Path]:
    """Export a study's trials and epochs; return the files written.

    ``csv`` writes two files beside ``output``: ``<stem>_trials.csv`` and ``<stem>_epochs.csv``
    (``-o out/run.csv`` gives ``out/run_trials.csv`` and ``out/run_epochs.csv``). ``json``
    writes one file ``output`` holding ``{"study": ..., "trials": [...], "epochs": [...]}``.
    ``sqlite`` writes the file ``output`` with tables ``trials``, ``epochs`` and a one-row
    ``study``; an existing file is replaced only if it is an earlier export.
    """
    writers: dict[str, Callable[[StudyTables, Path], list[Path]]] = {
        "csv": write_csv,
        "json": write_json,
        "sqlite": write_sqlite,
    }
    if fmt not in writers:
        raise InputError(f"export format {fmt!r} is not one of csv, json, sqlite")
    output = Path(output)
    _refuse_source(location, output)
    return writers[fmt](read_study(location, study_name), output)


def written_line(written: Sequence[Path], requested: Path) -> str:
    """What an export wrote, saying so when csv's file names differ from the one asked for."""
    names = " and ".join(str(path) for path in written)
    if list(written) == [requested]:
        return f"exported: {names}"
    return f"exported: {names} (csv writes one file per table, named after {requested.name})"


def param_column(name: str) -> str:
    return f"param_{name}"


def trial_columns(tables: StudyTables) -> list[str]:
    return [*TRIAL_COLUMNS, *(param_column(p.name) for p in tables.params)]


def trial_records(tables: StudyTables) -> list[dict[str, Any]]:
    """One dict per trial with exactly ``trial_columns`` as keys; None where nothing is known."""
    return [_trial_record(trial, tables.params) for trial in tables.trials]


def _trial_record(trial: TrialRow, params: Sequence[ParamInfo]) -> dict[str, Any]:
    failure = trial.failure
    record: dict[str, Any] = {
        "number": trial.number,
        "state": trial.word,
        "value": _number(trial.value),
        "epochs": trial.epochs,
        "seconds": _number(trial.seconds),
        "worker": trial.worker,
        "started": trial.start.isoformat() if trial.start else None,
        "finished": trial.end.isoformat() if trial.end else None,
        "end_reason": trial.end_reason,
        "diverged": trial.diverged,
        "retry_of": trial.retry_of,
        "seed": trial.seed,
        "failure_type": failure.kind if failure else None,
        "failure_message": failure.message if failure else None,
    }
    for info in params:
        record[param_column(info.name)] = _number(trial.params.get(info.name))
    return record


def epoch_records(tables: StudyTables) -> list[dict[str, Any]]:
    return [{key: _number(row[key]) for key in EPOCH_COLUMNS} for row in tables.epochs]


def _number(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def study_record(tables: StudyTables) -> dict[str, Any]:
    s = tables.summary
    baseline = s.baseline
    return {
        "name": s.name,
        "direction": s.direction,
        "objective": s.objective,
        "metric_name": s.metric_name,
        "task": s.task,
        "baseline_value": baseline.value if baseline else None,
        "baseline_measure": baseline.measure if baseline else None,
        "budget": s.budget,
        "workers": s.workers_planned,
        "spec_hash": s.spec_hash,
        "spec_text": s.spec_text,
    }


def csv_paths(output: Path) -> tuple[Path, Path]:
    stem = output.stem if output.suffix.lower() == ".csv" else output.name
    return output.with_name(f"{stem}_trials.csv"), output.with_name(f"{stem}_epochs.csv")


def write_csv(tables: StudyTables, output: Path) -> list[Path]:
    trials_path, epochs_path = csv_paths(output)
    _write_csv(trials_path, trial_columns(tables), trial_records(tables))
    _write_csv(epochs_path, list(EPOCH_COLUMNS), epoch_records(tables))
    return [trials_path, epochs_path]


def _write_csv(path: Path, columns: list[str], records: list[dict[str, Any]]) -> None:
    with _replacing(path) as temporary, temporary.open("w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(columns)
        writer.writerows([_csv_cell(r[c]) for c in columns] for r in records)


def _csv_cell(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    return value


def write_json(tables: StudyTables, output: Path) -> list[Path]:
    document = {
        "study": study_record(tables),
        "trial_columns": trial_columns(tables),
        "trials": trial_records(tables),
        "epoch_columns": list(EPOCH_COLUMNS),
        "epochs": epoch_records(tables),
    }
    with _replacing(output) as temporary:
        temporary.write_text(json.dumps(document, allow_nan=False, default=str), encoding="utf-8")
    return [output]


def write_sqlite(tables: StudyTables, output: Path) -> list[Path]:
    _refuse_foreign(output)
    with _replacing(output) as temporary:
        db = sqlite_utils.Database(temporary)
        try:
            _insert(db, "trials", _trial_types(tables), trial_records(tables), "number")
            epoch_types: dict[str, type] = {
                c: (int if c in EPOCH_INTEGERS else float) for c in EPOCH_COLUMNS
            }
            _insert(db, "epochs", epoch_types, epoch_records(tables), ("trial_number", "epoch"))
            record = study_record(tables)
            _insert(db, "study", {k: _kind(v) for k, v in record.items()}, [record], "name")
        finally:
            db.close()
    return [output]


def _insert(
    db: sqlite_utils.Database,
    name: str,
    types: dict[str, type],
    records: list[dict[str, Any]],
    pk: str | tuple[str, ...],
) -> None:
    # Explicit columns and complete records: sqlite-utils 4.2.1 mishandles ragged upserts.
    table = db.table(name)
    table.create(types, pk=pk)
    columns = list(types)
    rows = [{c: _sqlite_cell(r.get(c), types[c]) for c in columns} for r in records]
    table.insert_all(rows, column_order=columns)


def _sqlite_cell(value: Any, kind: type) -> Any:
    if isinstance(value, bool):
        return int(value)
    if kind is str and value is not None and not isinstance(value, str):
        return str(value)
    return value


def _trial_types(tables: StudyTables) -> dict[str, type]:
    types = {c: TRIAL_TYPES.get(c, str) for c in TRIAL_COLUMNS}
    for info in tables.params:
        types[param_column(info.name)] = _param_type(info)
    return types


def _param_type(info: ParamInfo) -> type:
    if info.kind == "int":
        return int
    if info.kind == "float":
        return float
    choices = [c for c in info.choices if c is not None]
    if choices and all(isinstance(c, int) and not isinstance(c, bool) for c in choices):
        return int
    if choices and all(isinstance(c, (int, float)) and not isinstance(c, bool) for c in choices):
        return float
    return str


def _kind(value: Any) -> type:
    if isinstance(value, int):  # bool included: SQLite stores it as 0 or 1
        return int
    return float if isinstance(value, float) else str


@contextmanager
def _replacing(path: Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; move it into place only if writing succeeded."""
    handle, temporary = create_beside(path, ".part")
    os.close(handle)
    try:
        yield temporary
        os.replace(temporary, path)
    finally:
        temporary.unlink(missing_ok=True)


def _refuse_source(location: str, output: Path) -> None:
    source = sqlite_path(storage_url(location))
    same = source is not None and output.exists() and source.resolve() == output.resolve()
    if same:
        raise InputError(f"{output}: this is the study database itself; export elsewhere")


def _refuse_foreign(output: Path) -> None:
    """Replace an earlier export, never some other file that happens to have the name."""
    if not output.exists():
        return
    try:
        with closing(sqlite3.connect(f"file:{output}?mode=ro", uri=True)) as connection:
            rows = connection.execute("SELECT name FROM sqlite_master WHERE type='table'")
            names = {row[0] for row in rows}
    except sqlite3.DatabaseError:
        raise InputError(f"{output}: exists and is not a SQLite file; choose a new path") from None
    if not names <= EXPORT_TABLES:
        others = ", ".join(sorted(names - EXPORT_TABLES))
        raise InputError(f"{output}: already holds other tables ({others}); choose a new path")
