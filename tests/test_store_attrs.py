"""The stored attribute schema: what the writers store is what the typed readers return."""

from __future__ import annotations

import math
from pathlib import Path

import optuna
from optuna.trial import TrialState

from sweeper.store.attrs import (
    StoredBaseline,
    StoredFailure,
    StudyInfo,
    StudyLaunch,
    TrialInfo,
    continuation_system_attrs,
    record_diverged,
    record_failure,
    record_progress,
    record_start,
    record_training,
    record_wall_seconds,
    set_stop_request,
    write_launch,
)
from sweeper.store.connect import open_storage
from sweeper.store.optuna_internals import claim_waiting_trial
from sweeper.sweep.study import quiet_optuna


def _study(tmp_path: Path) -> optuna.Study:
    quiet_optuna()
    storage = open_storage(str(tmp_path / "s.db"), heartbeat=False)
    return optuna.create_study(storage=storage, study_name="s")


def test_a_launch_reads_back_typed(tmp_path: Path) -> None:
    study = _study(tmp_path)
    baseline = StoredBaseline(0.25, "valid_loss", "predict the mean")
    launch = StudyLaunch(
        "[study]", "/a/spec.toml", "abc", {"study": {"name": "s"}}, "adding", "sums",
        baseline, "valid_loss", "mse", 8, 2,
    )  # fmt: skip
    write_launch(study, launch)
    set_stop_request(study, "interrupted")
    info = StudyInfo.of(study)
    assert (info.spec_text, info.spec_source, info.spec_hash) == ("[study]", "/a/spec.toml", "abc")
    assert info.spec_data == {"study": {"name": "s"}}
    assert (info.task, info.task_description, info.metric_name) == ("adding", "sums", "mse")
    assert (info.baseline, info.objective, info.budget, info.workers) == (
        baseline, "valid_loss", 8, 2
    )  # fmt: skip
    assert info.stop_request == "interrupted"
    set_stop_request(study, None)
    assert StudyInfo.of(study).stop_request is None


def test_a_study_sweeper_did_not_make_reads_as_defaults() -> None:
    info = StudyInfo({"budget": True, "baseline": {"measure": "m"}})
    assert (info.spec_text, info.spec_hash, info.budget, info.objective) == (
        None,
        None,
        None,
        "value",
    )
    assert info.baseline is not None and math.isnan(info.baseline.value)
    assert info.spec_data == {} and info.stop_request is None


def test_trial_writers_and_readers_agree(tmp_path: Path) -> None:
    study = _study(tmp_path)
    study.enqueue_trial({})
    claimed = claim_waiting_trial(study)
    assert claimed is not None
    trial = optuna.Trial(study, claimed)
    record_start(trial, seed=11, worker="h:1:w0", origin=trial.number)
    record_training(trial, {"lr": 0.01}, threads=2, trainer="window-1")
    record_progress(trial, 3, compute_seconds=1.5)
    record_diverged(trial, "loss went to inf in epoch 3")
    record_failure(trial, StoredFailure("ValueError", "bad", "Traceback ..."))
    record_wall_seconds(trial, 2.0)  # compute recorded already: kept
    info = TrialInfo.live(trial)
    assert (info.seed, info.worker, info.threads, info.training) == (11, "h:1:w0", 2, {"lr": 0.01})
    assert info.trainer == "window-1"
    assert (info.epochs, info.compute_seconds, info.wall_seconds) == (3, 1.5, 2.0)
    assert info.diverged and info.retry_of is None and info.origin == trial.number
    assert info.failure == StoredFailure("ValueError", "bad", "Traceback ...")
    assert info.end_reason == "failed: ValueError: bad"


def test_a_continuation_stands_for_the_interrupted_trials_origin() -> None:
    trial = optuna.trial.create_trial(
        state=TrialState.FAIL,
        user_attrs={"interrupted": True},
        system_attrs={"failed_trial": 2, "retry_history": [2]},
    )
    trial.number = 5
    info = TrialInfo.of(trial)
    assert info.interrupted and info.origin == 2
    assert continuation_system_attrs(info) == {
        "failed_trial": 2,
        "retry_history": [2, 5],
        "continues_interrupted": 5,
    }
