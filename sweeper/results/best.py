"""The best trial of a study: its parameters as a spec fragment, and a final fit of them.

The fragment is a ``[training]`` table (every training parameter, and the epochs the trial
ran) that replaces ``[search]`` in a spec; for an objective plugin it is a ``[search]`` table
of fixed values. The final fit trains the best configuration, with its seed, on the training
plus validation sequences for the epochs it ran, and scores it on the held-out split.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import optuna
from optuna.trial import FrozenTrial

from sweeper.errors import InputError, RunFailure
from sweeper.results.stored_trial import (
    StoredTrial,
    stored_trial,
    sweep_threads,
    torch_threads,
    training_setup,
)
from sweeper.spec.sections import Spec
from sweeper.store.attrs import StudyInfo, TrialInfo
from sweeper.tasks.base import Baseline, Task
from sweeper.tasks.refit import RefitTask
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.epoch_record import EpochRecord
from sweeper.training.models import ModelBuilder
from sweeper.training.trial_run import TrialRun


def best_trial(study: optuna.Study) -> FrozenTrial:
    try:
        return study.best_trial
    except ValueError:
        raise InputError(
            f"study '{study.study_name}' has no completed trial yet; run or resume it first"
        ) from None


def toml_value(value: Any) -> str:
    """A TOML literal that reads back as ``value`` (floats by repr, so exactly)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)  # inf and nan are TOML too
    return json.dumps(str(value), ensure_ascii=False)


def fragment(study: optuna.Study, spec: Spec) -> str:
    """The best parameters as TOML, headed by a comment that says where they come from."""
    trial = best_trial(study)
    objective = StudyInfo.of(study).objective
    epochs = TrialInfo.of(trial).epochs
    head = (
        f"# best of '{study.study_name}': trial {trial.number}, {objective} {trial.value!r}"
        f" after {'?' if epochs is None else epochs} epochs"
    )
    if spec.is_objective_plugin:
        return _table(head, "search", trial.params)
    stored = stored_trial(study, spec, trial)
    values = {"epochs": _epochs(trial, spec), **stored.params.as_dict()}
    return _table(f"{head}, seed {stored.seed}", "training", values)


def _table(head: str, name: str, values: Mapping[str, Any]) -> str:
    lines = [head, f"[{name}]"] + [f"{key} = {toml_value(v)}" for key, v in values.items()]
    return "\n".join(lines)


def _epochs(trial: FrozenTrial, spec: Spec) -> int:
    epochs = TrialInfo.of(trial).epochs
    return spec.training.epochs if epochs is None else epochs


@dataclass
class Refit:
    """The final fit of the best trial: the task it came from and the trained run."""

    spec: Spec
    stored: StoredTrial
    epochs: int
    task: Task
    refit: RefitTask
    build: ModelBuilder
    run: TrialRun

    @property
    def held_out(self) -> EpochRecord:
        return self.run.records[-1]

    def baseline(self) -> Baseline:
        return self.refit.baseline()


def refit_best(
    study: optuna.Study, spec: Spec, on_epoch: Callable[[EpochRecord], None] | None = None
) -> Refit:
    """Train the best configuration, with its seed and the sweep's thread count, on train +
    valid for the epochs it ran (so the same study always gives the same final model)."""
    trial = best_trial(study)
    stored = stored_trial(study, spec, trial)
    task, build = training_setup(spec)
    refit = RefitTask(task)
    epochs = _epochs(trial, spec)
    with torch_threads(sweep_threads(spec)):
        run = TrialRun(refit, stored.params, stored.seed, build)
        end = run_epochs(run, epochs, on_epoch=[] if on_epoch is None else [on_epoch])
    if end.how == "diverged":
        raise RunFailure(f"the final fit of trial {trial.number} {end.reason}; nothing saved")
    return Refit(spec, stored, epochs, task, refit, build, run)


def refit_lines(result: Refit) -> list[str]:
    """What the final fit reached on the held-out split, as TOML comments."""
    record, refit = result.held_out, result.refit
    split = "test split" if refit.held_out == "test" else "validation split (also trained on)"
    return [
        f"# held out, {split}: loss {record.valid_loss!r}, "
        f"{refit.metric_name} {record.valid_metric!r}",
        f"# baseline there: {result.baseline().description}",
    ]


def start_line(study: optuna.Study, spec: Spec) -> str:
    trial = best_trial(study)
    return (
        f"# final fit of trial {trial.number} on training + validation data "
        f"for {_epochs(trial, spec)} epochs"
    )


def epoch_line(record: EpochRecord) -> str:
    return (
        f"# epoch {record.epoch}: train loss {record.train_loss:.6g}, "
        f"held-out loss {record.valid_loss:.6g}, metric {record.valid_metric:.6g}"
    )
