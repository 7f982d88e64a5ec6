"""Interrupted studies resume without losing or repeating work (real processes and signals)."""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import pytest
from optuna.trial import TrialState

from sweeper.store.connect import redact
from tests import processes as proc

SPEC = """
[study]
name = "{name}"
trials = {trials}
workers = {workers}
seed = 13
heartbeat = 1

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 40
train_sequences = {sequences}
valid_sequences = 64

[training]
epochs = {epochs}
hidden = 16
threads = 1

[search]
unroll = {{ one_of = [10, 20, 40] }}
lr = {{ between = [0.002, 0.02], scale = "log" }}

[stopping]
rule = "none"  # every trial must complete
"""


def _spec(
    folder: Path,
    name: str = "r",
    trials: int = 3,
    workers: int = 1,
    epochs: int = 3,
    sequences: int = 2048,
) -> Path:
    path = folder / f"{name}.toml"
    path.write_text(
        SPEC.format(name=name, trials=trials, workers=workers, epochs=epochs, sequences=sequences)
    )
    return path


def _finished_once(trials: list) -> None:
    """No configuration's work is counted twice: one finished trial per origin."""
    finished = [t for t in trials if t.state in (TrialState.COMPLETE, TrialState.PRUNED)]
    origins = [t.user_attrs.get("retry_of", t.number) for t in finished]
    assert len(origins) == len(set(origins)), origins


@pytest.fixture
def study_location(storage_location: str) -> str:
    """The spec's default SQLite file (relative, as the resume hint prints it), or the URL of
    ``storage_location``'s PostgreSQL database."""
    return f"runs{os.sep}r.db" if storage_location.endswith(".db") else storage_location


def _at(location: str) -> tuple[str, ...]:
    """The ``--storage`` option a run needs to use ``location`` instead of the default."""
    return () if location.endswith(".db") else ("--storage", location)


@pytest.mark.parametrize(("sig", "workers"), [(signal.SIGINT, 1), (signal.SIGTERM, 2)])
def test_signal_exits_130_quickly_then_resume_completes(
    tmp_path: Path, sig: int, workers: int, study_location: str
) -> None:
    spec = _spec(tmp_path, trials=3, workers=workers)
    where = study_location if "://" in study_location else str(tmp_path / study_location)
    launcher = proc.start(tmp_path, "run", spec.name, *_at(study_location))
    proc.wait_for(lambda: proc.epoch_count_at(where, "r") >= 1, 120, "a first epoch")
    sent = time.monotonic()
    launcher.send_signal(sig)
    assert launcher.wait(timeout=30) == 130
    assert time.monotonic() - sent < 10
    assert f"sweeper resume {redact(study_location)}" in (tmp_path / "stderr.txt").read_text()

    resumed = proc.run(tmp_path, "resume", study_location)
    assert resumed.returncode == 0, resumed.stderr
    trials = proc.trials_at(where, "r")
    assert sum(t.state == TrialState.COMPLETE for t in trials) == 3
    _finished_once(trials)
    interrupted = [t for t in trials if t.user_attrs.get("interrupted")]
    continued = [
        t for t in trials if t.user_attrs.get("retry_of") in {i.number for i in interrupted}
    ]
    if workers == 1:  # the stop reaches the in-process worker at once, mid-epoch
        assert interrupted, "the signal should have caught a trial mid-epoch"
    assert len(continued) == len(interrupted)
    by_number = {t.number: t for t in trials}
    for trial in continued:  # each goes on from the last epoch its original completed
        done = by_number[trial.user_attrs["retry_of"]].user_attrs.get("epochs", 0)
        assert trial.user_attrs.get("resumed_from_epoch", 0) == done
    assert proc.checkpoint_epochs_at(where, "r") == {}, "finished trials keep no checkpoint"


def test_killed_trial_continues_bit_for_bit(tmp_path: Path) -> None:
    killed_dir = tmp_path / "killed"
    killed_dir.mkdir()
    db = killed_dir / "runs" / "r.db"
    launcher = proc.start(killed_dir, "run", _spec(killed_dir, trials=1, epochs=4).name)
    proc.wait_for(lambda: proc.checkpoint_epochs(db).get(0, 0) >= 2, 120, "epoch 2's checkpoint")
    launcher.kill()
    launcher.wait()
    resumed = proc.run(killed_dir, "resume", "runs/r.db")
    assert resumed.returncode == 0, resumed.stderr

    trials = proc.trials(db, "r")
    (retry,) = [t for t in trials if t.state == TrialState.COMPLETE]
    assert retry.user_attrs["retry_of"] == 0 and retry.user_attrs["resumed_from_epoch"] >= 2
    # the uninterrupted twin: the same parameters and seed trained from scratch, every
    # recorded number compared exactly
    twin = proc.run(killed_dir, "replay", "runs/r.db", str(retry.number))
    assert twin.returncode == 0, twin.stdout + twin.stderr
    assert "agree: the replay matches the record exactly (4 epochs" in twin.stdout


def _checkpointed_worker_pids(db: Path, last_epoch: int = 1) -> list[int]:
    """Process ids of the workers running a trial that has saved its first epoch's checkpoint.

    Two of its three epochs are still to run, so a kill shortly after lands inside the trial,
    not in the next one (whose retry would rightly start from scratch).
    """
    rows = proc.query(
        db,
        "SELECT a.value_json FROM trials t "
        "JOIN trial_user_attributes a ON a.trial_id = t.trial_id AND a.key = 'worker' "
        "JOIN sweeper_checkpoints c ON c.trial_number = t.number "
        f"WHERE t.state = 'RUNNING' AND c.epoch BETWEEN 1 AND {int(last_epoch)}",
    )
    return [int(value.strip('"').split(":")[1]) for (value,) in rows]


def _pool_workers(launcher_pid: int) -> list[int]:
    """The pool's worker processes: children of the launcher's fork server."""
    servers = [pid for pid in proc.children(launcher_pid) if "forkserver" in proc.cmdline(pid)]
    return [pid for server in servers for pid in proc.children(server)]


def _kill_a_checkpointed_worker(launcher_pid: int, db: Path, pause: float) -> None:
    """SIGKILL a pool worker ``pause`` seconds after its trial saved its first checkpoint.

    The worker is stopped (SIGSTOP) before it is checked to be still inside that trial, so a
    loaded machine cannot let it move on between the check and the kill."""
    proc.wait_for(lambda: len(_pool_workers(launcher_pid)) == 2, 120, "two workers")
    victim: list[int] = []

    def checkpointed_worker() -> bool:
        victim[:] = [
            pid for pid in _checkpointed_worker_pids(db) if pid in _pool_workers(launcher_pid)
        ]
        return bool(victim)

    while True:
        proc.wait_for(checkpointed_worker, 120, "a running trial with a checkpoint")
        time.sleep(pause)
        os.kill(victim[0], signal.SIGSTOP)
        if victim[0] in _checkpointed_worker_pids(db, last_epoch=2):
            os.kill(victim[0], signal.SIGKILL)
            return
        os.kill(victim[0], signal.SIGCONT)  # it finished that trial meanwhile: try the next


@pytest.mark.parametrize("moment", ["during an epoch", "right after a checkpoint"])
def test_sigkill_one_worker_then_resume(tmp_path: Path, moment: str) -> None:
    # epochs of about half a second, so that the kill has a wide window inside one trial
    spec = _spec(tmp_path, trials=4, workers=2, epochs=3, sequences=8192)
    db = tmp_path / "runs" / "r.db"
    launcher = proc.start(tmp_path, "run", spec.name, new_group=True)
    try:
        _kill_a_checkpointed_worker(
            launcher.pid, db, pause=0.3 if moment == "during an epoch" else 0
        )
        launcher.wait(timeout=240)
    finally:
        if launcher.poll() is None:  # a failed wait must not leave the sweep running
            os.killpg(launcher.pid, signal.SIGKILL)
            launcher.wait()

    resumed = proc.run(tmp_path, "resume", "runs/r.db")
    assert resumed.returncode == 0, resumed.stderr
    trials = proc.trials(db, "r")
    assert sum(t.state == TrialState.COMPLETE for t in trials) == 4
    _finished_once(trials)
    assert proc.query(db, "PRAGMA integrity_check") == [("ok",)]
    retried = [t for t in trials if "retry_of" in t.user_attrs and t.state == TrialState.COMPLETE]
    assert retried, "the killed worker's trial must be retried"
    assert any(t.user_attrs.get("resumed_from_epoch", 0) >= 1 for t in retried)
    for trial in retried:  # its epoch count proves where it continued
        assert trial.user_attrs["epochs"] == 3
        assert proc.curves(db)[trial.number][-1][0] == 3
    assert proc.checkpoint_epochs(db) == {}, "finished trials keep no checkpoint"


def test_second_ctrl_c_stops_at_once_and_resume_recovers(tmp_path: Path) -> None:
    spec = _spec(tmp_path, trials=2, workers=1, epochs=3)
    db = tmp_path / "runs" / "r.db"
    launcher = proc.start(tmp_path, "run", spec.name)
    proc.wait_for(lambda: proc.epoch_count(db) >= 1, 120, "a first epoch")
    sent = time.monotonic()
    launcher.send_signal(signal.SIGINT)
    launcher.send_signal(signal.SIGINT)
    assert launcher.wait(timeout=10) == 130
    assert time.monotonic() - sent < 3, "the second Ctrl-C does not wait for the workers"
    left = [t for t in proc.trials(db, "r") if t.state in (TrialState.RUNNING, TrialState.FAIL)]
    assert left, "the trial in flight is left running (or marked interrupted) for resume"

    resumed = proc.run(tmp_path, "resume", "runs/r.db")
    assert resumed.returncode == 0, resumed.stderr
    trials = proc.trials(db, "r")
    assert sum(t.state == TrialState.COMPLETE for t in trials) == 2
    _finished_once(trials)
    status = proc.run(tmp_path, "status", "runs/r.db")
    assert "retried trials" in status.stdout and "in place of trial" in status.stdout


class _WorkerDied(BaseException):
    """Stands in for SIGKILL: not an Exception, so no handler records the trial's end."""


def test_retry_of_a_trial_killed_after_its_last_checkpoint_records_every_epoch(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch, storage_location: str
) -> None:
    from optuna.storages import RetryHeartbeatStaleTrialCallback

    from sweeper.spec.loading import load_spec
    from sweeper.store import checkpoints
    from sweeper.store.optuna_internals import fail_running, trial_id
    from sweeper.sweep import runner
    from sweeper.sweep.launcher import open_for_launch
    from sweeper.sweep.study import top_up
    from sweeper.sweep.workers import work

    spec = load_spec(_spec(in_tmp, trials=1, epochs=2, sequences=64))
    spec = spec.with_overrides(storage=storage_location)
    study = open_for_launch(spec)
    top_up(study, spec)
    saved = checkpoints.save

    def save_then_die(engine: object, name: str, origin: int, epoch: int, state: dict) -> None:
        saved(engine, name, origin, epoch, state)  # type: ignore[arg-type]
        if epoch == 2:  # the last epoch's state is stored, its "epochs" attribute is not
            raise _WorkerDied

    monkeypatch.setattr(runner.checkpoints, "save", save_then_die)
    with pytest.raises(_WorkerDied):
        work(spec.storage_location, "r", 0, threads=1)
    monkeypatch.setattr(runner.checkpoints, "save", saved)
    (dead,) = study.get_trials()
    assert dead.state == TrialState.RUNNING and dead.user_attrs["epochs"] == 1
    # what the coordinator does with a trial whose heartbeat stopped
    assert fail_running(study, trial_id(dead))
    RetryHeartbeatStaleTrialCallback(max_retry=3)(study, study.get_trials()[0])

    work(spec.storage_location, "r", 0, threads=1)
    retry = study.get_trials()[1]
    assert retry.state == TrialState.COMPLETE and retry.user_attrs["resumed_from_epoch"] == 2
    assert retry.user_attrs["epochs"] == 2
    assert retry.user_attrs["compute_seconds"] > 0


def test_a_continuation_keeps_the_trainer_revision_of_its_checkpoint(
    in_tmp: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from optuna.storages import RetryHeartbeatStaleTrialCallback

    from sweeper.spec.loading import load_spec
    from sweeper.store import checkpoints
    from sweeper.store.optuna_internals import fail_running, trial_id
    from sweeper.sweep import runner
    from sweeper.sweep.launcher import open_for_launch
    from sweeper.sweep.study import top_up
    from sweeper.sweep.workers import work
    from sweeper.training.numerics import SWITCH, TORCH_MODULES
    from tests.conftest import invoke

    path = _spec(in_tmp, trials=1, epochs=2, sequences=64)
    path.write_text(path.read_text().replace("hidden = 16", 'hidden = 16\ncell = "gru"'))
    spec = load_spec(path)
    study = open_for_launch(spec)
    top_up(study, spec)
    saved = checkpoints.save

    def save_then_die(engine: object, name: str, origin: int, epoch: int, state: dict) -> None:
        saved(engine, name, origin, epoch, state)  # type: ignore[arg-type]
        raise _WorkerDied

    # the first epoch trained through torch's nn.GRU, as by a sweeper before our recurrence
    monkeypatch.setenv(SWITCH, "torch")
    monkeypatch.setattr(runner.checkpoints, "save", save_then_die)
    with pytest.raises(_WorkerDied):
        work(spec.storage_location, "r", 0, threads=1)
    monkeypatch.setattr(runner.checkpoints, "save", saved)
    monkeypatch.delenv(SWITCH)
    (dead,) = study.get_trials()
    assert fail_running(study, trial_id(dead))
    RetryHeartbeatStaleTrialCallback(max_retry=3)(study, study.get_trials()[0])

    work(spec.storage_location, "r", 0, threads=1)  # the second epoch, by today's sweeper
    retry = study.get_trials()[1]
    assert retry.state == TrialState.COMPLETE and retry.user_attrs["resumed_from_epoch"] == 1
    assert retry.user_attrs["trainer"] == TORCH_MODULES
    replayed = invoke("replay", spec.storage_location, "1")
    assert replayed.exit_code == 0, replayed.output
    assert replayed.output.splitlines()[-1].startswith("agree: the replay matches the record")


def test_a_sweeps_end_drops_checkpoints_that_dead_workers_left(
    in_tmp: Path, storage_location: str
) -> None:
    from sweeper.store import checkpoints
    from sweeper.store.connect import open_storage
    from tests.conftest import invoke

    spec = _spec(in_tmp, trials=1, epochs=1, sequences=64)
    assert invoke("run", spec.name, "--storage", storage_location).exit_code == 0
    engine = open_storage(storage_location).engine
    # a worker killed between recording its trial's end and dropping the checkpoint
    checkpoints.save(engine, "r", 0, 1, {"epoch": 1})
    checkpoints.save(engine, "r", 1100, 1, {"epoch": 1})  # no such trial: left alone
    more = invoke("run", spec.name, "--trials", "2", "--storage", storage_location)
    assert more.exit_code == 0
    assert checkpoints.stored(engine, "r") == {1100: 1}
    checkpoints.drop(engine, "r", list(range(1200)))  # more numbers than one statement takes
    assert checkpoints.stored(engine, "r") == {}


def test_a_double_ctrl_c_stops_pool_workers_at_once(tmp_path: Path) -> None:
    # a double Ctrl-C as a terminal sends it to the launcher alone, 0.02 s apart
    spec = _spec(tmp_path, trials=10, workers=2, epochs=3)
    db = tmp_path / "runs" / "r.db"
    launcher = proc.start(tmp_path, "run", spec.name)
    proc.wait_for(lambda: proc.epoch_count(db) >= 1, 120, "a first epoch")
    sent = time.monotonic()
    launcher.send_signal(signal.SIGINT)
    time.sleep(0.02)
    launcher.send_signal(signal.SIGINT)
    assert launcher.wait(timeout=30) == 130
    assert time.monotonic() - sent < 8, "the second Ctrl-C does not wait for the budget"
    epochs = proc.epoch_count(db)
    time.sleep(3)
    assert proc.epoch_count(db) == epochs, "no worker trains on after the launcher left"
    finished = [
        t for t in proc.trials(db, "r") if t.state.is_finished() and t.state != TrialState.FAIL
    ]
    assert len(finished) < 10
    assert "stopped at once" in (tmp_path / "stderr.txt").read_text()
