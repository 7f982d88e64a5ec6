"""A disk that fills up mid-sweep: one line naming where, exit 1, and resume once space is freed.

The study lives on a small tmpfs of its own (mounting one needs root; skipped otherwise).
"""

from __future__ import annotations

import os
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest
from optuna.trial import TrialState

from tests import processes as proc

SPEC = """
[study]
name = "f"
trials = 12
workers = 1
seed = 3
storage = "f.db"

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 20
train_sequences = 256
valid_sequences = 32

[training]
epochs = 3
hidden = 8
threads = 1

[search]
unroll = { one_of = [10, 20] }
lr = { between = [0.002, 0.02], scale = "log" }

[stopping]
rule = "none"
"""


@pytest.fixture
def small_disk(tmp_path: Path) -> Iterator[Path]:
    """A 16 MiB filesystem (SQLite's write-ahead log alone may grow to 4 MiB)."""
    folder = tmp_path / "disk"
    folder.mkdir()
    mounted = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=16m", "tmpfs", str(folder)], capture_output=True
    )
    if mounted.returncode != 0:
        pytest.skip("cannot mount a small filesystem here (needs root)")
    try:
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)], check=False)


def _fill(folder: Path, leave: int) -> Path:
    """A file that takes all the free space but ``leave`` bytes."""
    stats = os.statvfs(folder)
    filler = folder / "filler"
    filler.write_bytes(bytes(max(0, stats.f_bavail * stats.f_frsize - leave)))
    return filler


def _one_error_line(stderr: str) -> str:
    assert "Traceback" not in stderr, stderr
    errors = [line for line in stderr.splitlines() if line.startswith("sweeper: error:")]
    assert len(errors) == 1, stderr
    assert stderr.rstrip().endswith(errors[0]), stderr  # nothing after it either
    return errors[0]


@pytest.mark.slow  # two sweeps on a tmpfs, about a minute
def test_full_disk_stops_the_sweep_in_one_line_and_resume_completes(small_disk: Path) -> None:
    (small_disk / "f.toml").write_text(SPEC)
    filler = _fill(small_disk, leave=1200 * 1024)  # room for the study and a trial or two
    ran = proc.run(small_disk, "run", "f.toml", timeout=120)

    assert ran.returncode == 1, ran.stderr
    line = _one_error_line(ran.stderr)
    db = small_disk / "f.db"
    assert f"disk full at {db}; free space, then: sweeper resume f.db" in line
    assert proc.query(db, "PRAGMA integrity_check") == [("ok",)]
    failed = [t for t in proc.trials(db, "f") if t.state == TrialState.FAIL]
    assert not failed, "a full disk is not the trial's fault: the sampler must not learn it"

    filler.unlink()
    resumed = proc.run(small_disk, "resume", "f.db", timeout=180)
    assert resumed.returncode == 0, resumed.stderr
    done = [t for t in proc.trials(db, "f") if t.state == TrialState.COMPLETE]
    assert len(done) == 12


@pytest.mark.slow  # a sweep and a report, about 25 s
def test_report_onto_a_full_disk_is_one_line(tmp_path: Path, small_disk: Path) -> None:
    (tmp_path / "f.toml").write_text(SPEC.replace("trials = 12", "trials = 2"))
    assert proc.run(tmp_path, "run", "f.toml").returncode == 0
    _fill(small_disk, leave=0)
    page = small_disk / "page.html"
    wrote = proc.run(tmp_path, "report", "f.db", "-o", str(page))

    assert wrote.returncode == 1, wrote.stderr
    assert f"disk full at {page}" in _one_error_line(wrote.stderr)
    assert list(small_disk.iterdir()) == [small_disk / "filler"], "no half-written page left"
