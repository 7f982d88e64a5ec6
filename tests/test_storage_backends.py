"""One storage contract, two backends: every test runs on SQLite and on PostgreSQL."""

from __future__ import annotations

import json
import time
from pathlib import Path

import optuna
import torch
from optuna.trial import TrialState

from sweeper.store import checkpoints, epoch_rows, tables
from sweeper.store.connect import engine_of, open_storage
from sweeper.sweep import lease
from tests.conftest import invoke, write_tiny_spec


def _study(location: str, name: str) -> optuna.Study:
    return optuna.load_study(study_name=name, storage=open_storage(location, create=False))


def test_sweep_status_report_export(in_tmp: Path, storage_location: str) -> None:
    spec = write_tiny_spec(in_tmp, trials=3, epochs=2)
    result = invoke("run", spec.name, "--storage", storage_location, "--report", "s.html")
    assert result.exit_code == 0, result.output
    study = _study(storage_location, "tiny")
    assert [t.state for t in study.get_trials()] == [TrialState.COMPLETE] * 3
    rows = epoch_rows.read_epochs(engine_of(study), "tiny")
    assert [(r["trial_number"], r["epoch"]) for r in rows] == [
        (n, e) for n in range(3) for e in (1, 2)
    ]
    status = invoke("status", storage_location)
    assert status.exit_code == 0 and "finished" in status.output
    assert (in_tmp / "s.html").stat().st_size > 1_000_000
    exported = invoke("export", storage_location, "--format", "json", "-o", "flat.json")
    assert exported.exit_code == 0, exported.output
    data = json.loads((in_tmp / "flat.json").read_text())
    assert len(data["trials"]) == 3 and len(data["epochs"]) == 6


def test_checkpoint_save_load_drop(storage_location: str) -> None:
    storage = open_storage(storage_location)
    engine = storage.engine
    tables.ensure_tables(engine)
    state = {"epoch": 2, "weights": torch.arange(6.0).reshape(2, 3), "rng": [1, 2, 3]}
    checkpoints.save(engine, "s", 4, 2, state)
    checkpoints.save(engine, "s", 4, 3, {**state, "epoch": 3})  # replaces, never adds
    assert checkpoints.stored(engine, "s") == {4: 3}
    loaded = checkpoints.load(engine, "s", 4)
    assert loaded is not None and loaded["epoch"] == 3
    assert torch.equal(loaded["weights"], state["weights"])
    assert checkpoints.load(engine, "s", 5) is None
    checkpoints.drop(engine, "s", [4])
    assert checkpoints.stored(engine, "s") == {}


def test_one_coordinator_at_a_time(storage_location: str) -> None:
    engine = open_storage(storage_location).engine
    tables.ensure_tables(engine)
    assert lease.acquire(engine, "s", "host-a", seconds=0.5)
    assert not lease.acquire(engine, "s", "host-b", seconds=0.5)
    assert lease.acquire(engine, "s", "host-a", seconds=0.5)  # the holder renews
    time.sleep(0.6)
    assert lease.acquire(engine, "s", "host-b", seconds=5)  # an expired lease is taken over
    lease.release(engine, "s", "host-b")
    assert lease.acquire(engine, "s", "host-a", seconds=5)
