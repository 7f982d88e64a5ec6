"""Workers and torch threads never silently outnumber the cores."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
from pathlib import Path

import optuna
import pytest

from sweeper.cli import _warn_if_crowded
from sweeper.spec.loading import load_spec
from sweeper.spec.sections import Spec
from sweeper.store.attrs import record_start, record_training
from sweeper.sweep import cores, launcher
from sweeper.sweep.launcher import busy_threads_here, joiner_threads
from sweeper.sweep.workers import default_threads
from tests.conftest import invoke, write_tiny_spec


@pytest.fixture
def four_cores(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(cores, "usable_cores", lambda: 4)
    monkeypatch.setattr(launcher, "usable_cores", lambda: 4)


def test_threads_follow_the_cores_this_process_may_use(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(os, "sched_getaffinity", lambda _pid: {0}, raising=False)
    assert cores.usable_cores() == 1  # as `taskset -c 0` allows, whatever the machine has
    assert default_threads(1) == 1


@pytest.mark.usefixtures("four_cores")
def test_threads_share_the_cores_left_free() -> None:
    assert [default_threads(1, busy) for busy in (0, 1, 3, 4, 9)] == [4, 3, 1, 1, 1]
    assert default_threads(2) == 2 and default_threads(8) == 1


@pytest.mark.usefixtures("four_cores")
def test_more_workers_than_cores_are_warned_about(
    in_tmp: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    spec = load_spec(str(write_tiny_spec(in_tmp)))
    _warn_if_crowded(spec.with_overrides(workers=4))
    assert capsys.readouterr().err == ""
    _warn_if_crowded(spec.with_overrides(workers=64))
    assert capsys.readouterr().err == (
        "sweeper: warning: 64 workers x 1 torch threads on 4 cores: "
        "trials slow each other down; use --workers 4\n"
    )
    _warn_if_crowded(_with_threads(in_tmp, 2).with_overrides(workers=4))  # the spec's threads
    assert capsys.readouterr().err.startswith("sweeper: warning: 4 workers x 2 torch threads")


def _with_threads(folder: Path, threads: int) -> Spec:
    path = write_tiny_spec(folder)
    path.write_text(path.read_text().replace("batch = 32", f"batch = 32\nthreads = {threads}"))
    return load_spec(str(path))


def _running_trial(study: optuna.Study, pid: int, threads: int) -> None:
    trial = study.ask()
    record_start(trial, seed=0, worker=f"{socket.gethostname()}:{pid}:w0", origin=trial.number)
    record_training(trial, {}, threads, "window-1")


def _dead_pid() -> int:
    done = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        check=True,
        capture_output=True,
        text=True,
    )
    return int(done.stdout)


@pytest.mark.usefixtures("four_cores")
def test_a_joining_worker_takes_the_cores_left_free(in_tmp: Path) -> None:
    spec = load_spec(str(write_tiny_spec(in_tmp)))
    study = optuna.create_study(storage=f"sqlite:///{in_tmp / 'j.db'}")
    assert joiner_threads(study, spec) == (4, "all 4 cores of this host")
    _running_trial(study, os.getpid(), threads=3)  # a live worker here
    _running_trial(study, _dead_pid(), threads=2)  # a worker that is gone
    assert busy_threads_here(study) == 3
    assert joiner_threads(study, spec) == (1, "3 of 4 cores here train other workers' trials")
    assert joiner_threads(study, _with_threads(in_tmp, 3)) == (3, "training.threads in the spec")


@pytest.mark.usefixtures("four_cores")
def test_sweeper_worker_prints_its_threads(in_tmp: Path) -> None:
    spec = write_tiny_spec(in_tmp, trials=1, epochs=1)
    assert invoke("run", spec.name, "--report", "p.html").exit_code == 0
    result = invoke("worker", "runs/tiny.db")  # budget met: it leaves at once
    assert result.exit_code == 0, result.output
    assert result.stderr.splitlines()[0] == "worker: 4 torch threads (all 4 cores of this host)"
