"""Commands that read a study leave files that are not studies alone, and spot damaged ones."""

from __future__ import annotations

import hashlib
import os
import shutil
import sqlite3
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import optuna
import pytest

from tests.conftest import invoke, write_tiny_spec

READING = [["status"], ["report"], ["resume"], ["best"], ["export", "--format", "json", "-o"]]


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _one_error_line(result, expected: str) -> None:
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert expected in lines[0], lines[0]


@pytest.mark.parametrize("command", READING, ids=lambda c: c[0])
def test_a_database_that_is_no_study_stays_byte_for_byte(tmp_path: Path, command) -> None:
    other = tmp_path / "inventory.db"
    with sqlite3.connect(other) as connection:
        connection.execute("CREATE TABLE shelves (id INTEGER PRIMARY KEY, label TEXT)")
        connection.execute("INSERT INTO shelves (label) VALUES ('spare fans')")
    before = _digest(other)
    extra = [str(tmp_path / "out.json")] if command[0] == "export" else []
    result = invoke(command[0], str(other), *command[1:], *extra)
    _one_error_line(result, "not a sweeper study")
    assert _digest(other) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["inventory.db"]


@pytest.mark.parametrize("command", READING, ids=lambda c: c[0])
def test_a_file_that_is_no_database_is_bad_input(tmp_path: Path, command) -> None:
    notes = tmp_path / "notes.db"
    notes.write_text("greenhouse fan log, not a database\n" * 200)
    extra = [str(tmp_path / "out.json")] if command[0] == "export" else []
    result = invoke(command[0], str(notes), *command[1:], *extra)
    _one_error_line(result, "not a sweeper study: cannot read it as a database")


def _damaged_study(path: Path) -> None:
    """A study file with random-looking bytes over one page in the middle of its trials."""
    storage = optuna.storages.RDBStorage(f"sqlite:///{path}")
    study = optuna.create_study(study_name="s", storage=storage)
    for number in range(300):
        study.enqueue_trial({"x": float(number)}, user_attrs={"note": "x" * 200})
    storage.engine.dispose()
    data = bytearray(path.read_bytes())
    page = 4096
    pages = len(data) // page
    assert pages > 8
    # random-looking bytes over one page in the middle of the trial tables
    middle = (pages // 2) * page
    data[middle : middle + page] = hashlib.sha256(b"x").digest() * (page // 32)
    path.write_bytes(bytes(data))


def test_a_damaged_study_file_is_named_as_such(tmp_path: Path) -> None:
    path = tmp_path / "study.db"
    _damaged_study(path)
    result = invoke("status", str(path))
    _one_error_line(result, "the study file is damaged")
    assert "no trial was started" in result.output


@pytest.fixture
def read_only_study(in_tmp: Path) -> Iterator[Path]:
    """A finished tiny study seen through a read-only bind mount (needs root and mount)."""
    spec = write_tiny_spec(in_tmp, trials=2, epochs=1)
    # in its own process, which closes the database as a finished command does
    subprocess.run([sys.executable, "-m", "sweeper", "run", str(spec)], check=True)
    view = in_tmp / "view"
    view.mkdir()
    mounted = subprocess.run(["mount", "--bind", str(in_tmp / "runs"), str(view)], check=False)
    if mounted.returncode != 0:
        pytest.skip("cannot bind-mount here (needs root): no read-only file system to test on")
    try:
        subprocess.run(["mount", "-o", "remount,bind,ro", str(view)], check=True)
        yield view / "tiny.db"
    finally:
        subprocess.run(["umount", str(view)], check=False)


@pytest.mark.skipif(shutil.which("mount") is None, reason="no mount command")
def test_read_commands_read_a_study_on_a_read_only_disk(read_only_study: Path) -> None:
    assert not os.access(read_only_study.parent, os.W_OK)
    status = invoke("status", str(read_only_study))
    assert status.exit_code == 0, status.output
    assert "study tiny" in status.output
    best = invoke("best", str(read_only_study))
    assert best.exit_code == 0, best.output
    out = read_only_study.parent.parent / "summary.html"
    report = invoke("report", str(read_only_study), "-o", str(out))
    assert report.exit_code == 0, report.output
    assert out.stat().st_size > 0


@pytest.mark.skipif(shutil.which("mount") is None, reason="no mount command")
def test_write_commands_say_the_study_is_read_only(read_only_study: Path) -> None:
    result = invoke("resume", str(read_only_study))
    _one_error_line(result, "the study is read-only")


@pytest.mark.skipif(shutil.which("mount") is None, reason="no mount command")
def test_a_new_study_in_a_read_only_folder_is_one_line(read_only_study: Path) -> None:
    folder = read_only_study.parent
    spec = write_tiny_spec(folder.parent, name="fresh", trials=1, epochs=1)
    result = invoke("run", str(spec), "--storage", str(folder / "deeper" / "fresh.db"))
    _one_error_line(result, f"{folder}: no permission to create the study fresh.db here")


def test_damage_found_mid_sweep_stops_with_one_line(tmp_path: Path) -> None:
    from sweeper.errors import InputError
    from sweeper.store.faults import storage_faults_of_study

    path = tmp_path / "study.db"
    _damaged_study(path)
    malformed = sqlite3.DatabaseError("database disk image is malformed")
    with (
        pytest.raises(InputError, match=r"the study file is damaged .*Page"),
        storage_faults_of_study(str(path)),
    ):
        raise RuntimeError("a write failed") from malformed
