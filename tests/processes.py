"""Helpers for tests that run sweeper in real processes and watch its study database."""

from __future__ import annotations

import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import optuna
import sqlalchemy as sa

from sweeper.results.replay import COMPARED
from sweeper.store import checkpoints, epoch_rows
from sweeper.store.connect import sqlite_path, storage_url


def start(folder: Path, *args: str, new_group: bool = False) -> subprocess.Popen[str]:
    """``python -m sweeper ARGS`` in ``folder``; output goes to files beside the study.

    ``new_group``: in a process group of its own, as a service manager starts it, so that
    ``os.killpg(launcher.pid, ...)`` signals the launcher and all of its processes."""
    # the child keeps its own copies of the file descriptors
    with open(folder / "stdout.txt", "a") as out, open(folder / "stderr.txt", "a") as err:
        return subprocess.Popen(
            [sys.executable, "-m", "sweeper", *args],
            cwd=folder,
            stdout=out,
            stderr=err,
            text=True,
            start_new_session=new_group,
        )


def run(folder: Path, *args: str, timeout: float = 240) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "sweeper", *args],
        cwd=folder,
        capture_output=True,
        text=True,
        timeout=timeout,
    )


def wait_for(condition: Callable[[], bool], timeout: float, what: str) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            if condition():
                return
        except sqlite3.OperationalError:  # the database is not created yet
            pass
        time.sleep(0.05)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


def query(db: Path, sql: str) -> list[tuple]:
    if not db.exists():
        raise sqlite3.OperationalError("no database yet")
    with sqlite3.connect(db, timeout=30) as connection:
        return connection.execute(sql).fetchall()


def checkpoint_epochs(db: Path) -> dict[int, int]:
    return dict(query(db, "SELECT trial_number, epoch FROM sweeper_checkpoints"))


def epoch_count(db: Path) -> int:
    return int(query(db, "SELECT COUNT(*) FROM sweeper_epochs")[0][0])


def curves(db: Path) -> dict[int, list[tuple]]:
    """Per trial, its epochs' recorded numbers except wall-clock ones."""
    rows = query(
        db,
        "SELECT trial_number, epoch, train_loss, valid_loss, valid_metric, grad_norm_mean, "
        "grad_norm_median, grad_norm_p95, grad_norm_max, clip_fraction, nonfinite_steps, steps "
        "FROM sweeper_epochs ORDER BY trial_number, epoch",
    )
    out: dict[int, list[tuple]] = {}
    for row in rows:
        out.setdefault(row[0], []).append(row[1:])
    return out


def trials(db: Path, name: str) -> list[optuna.trial.FrozenTrial]:
    from sweeper.store.connect import open_storage

    study = optuna.load_study(study_name=name, storage=open_storage(str(db), create=False))
    return study.get_trials()


def children(pid: int) -> list[int]:
    """Direct child processes of ``pid`` (Linux)."""
    found = []
    for task in Path(f"/proc/{pid}/task").iterdir():
        text = (task / "children").read_text().split()
        found += [int(child) for child in text]
    return found


def cmdline(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode()
    except FileNotFoundError:
        return ""


def trials_at(location: str, name: str) -> list[optuna.trial.FrozenTrial]:
    from sweeper.store.connect import open_storage

    study = optuna.load_study(study_name=name, storage=open_storage(location, create=False))
    return study.get_trials()


# The same views of a study at any storage location (a .db path or a PostgreSQL URL). A plain
# engine, not open_storage: creating optuna's tables here would race the launcher's.
_ENGINES: dict[str, sa.Engine] = {}


def _engine(location: str) -> sa.Engine | None:
    url = storage_url(location)
    path = sqlite_path(url)
    if path is not None and not path.exists():
        return None  # not created yet; connecting would create an empty file
    if url not in _ENGINES:
        _ENGINES[url] = sa.create_engine(url)
    return _ENGINES[url]


def _has(engine: sa.Engine | None, table: str) -> bool:
    return engine is not None and sa.inspect(engine).has_table(table)


def epoch_count_at(location: str, name: str) -> int:
    engine = _engine(location)
    if engine is None or not _has(engine, "sweeper_epochs"):
        return 0
    return len(epoch_rows.read_epochs(engine, name))


def checkpoint_epochs_at(location: str, name: str) -> dict[int, int]:
    engine = _engine(location)
    if engine is None or not _has(engine, "sweeper_checkpoints"):
        return {}
    return checkpoints.stored(engine, name)


def curves_at(location: str, name: str) -> dict[int, list[tuple]]:
    """``curves`` at any location."""
    engine = _engine(location)
    assert engine is not None, f"no study at {location}"
    out: dict[int, list[tuple]] = {}
    for row in epoch_rows.read_epochs(engine, name):
        values = tuple(row[key] for key in CURVE_COLUMNS)
        out.setdefault(int(row["trial_number"]), []).append(values)
    return out


# what a curve holds: every number a replay compares, by epoch
CURVE_COLUMNS = ("epoch", *COMPARED)
