"""The best trial of a study: its parameters as TOML, the spec fixed at them, a final fit.

The fragment is a ``[training]`` table (every training parameter, and the epochs of the
trial's score; for an objective plugin a ``[search]`` table of fixed values) to merge into a
spec by hand. ``fixed_spec`` is the whole stored spec with its search fixed at those values,
a one-trial study ready to run. The final fit trains the best configuration, with its seed,
on the training plus validation sequences for its score's epochs (its best epoch under
``score = "best_epoch"``, else every epoch it ran), shows only training progress while it
trains, and scores the held-out split once, at the end.
"""

from __future__ import annotations

import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import optuna
import torch
from optuna.trial import FrozenTrial

from sweeper.errors import InputError, RunFailure, SpecError
from sweeper.results.choice import chosen_trial, confirmed_choice
from sweeper.results.fixed_spec import SEARCHLESS_SAMPLERS, SpecEdit, fixed_text, toml_value
from sweeper.results.stored_trial import (
    StoredTrial,
    stored_trial,
    sweep_threads,
    torch_threads,
    training_setup,
)
from sweeper.seeds import trial_seed
from sweeper.spec.loading import parse_spec
from sweeper.spec.sections import Spec
from sweeper.store.attrs import StudyInfo, TrialInfo
from sweeper.store.connect import redact
from sweeper.tasks import forecast_scores
from sweeper.tasks.base import Baseline, Task
from sweeper.tasks.refit import RefitTask
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.epoch_record import EpochRecord
from sweeper.training.models import ModelBuilder
from sweeper.training.trial_run import TrialRun


def fragment(study: optuna.Study, spec: Spec) -> str:
    """The best parameters as TOML, headed by a comment that says where they come from."""
    trial = chosen_trial(study, spec)
    objective = StudyInfo.of(study).objective
    head = (
        f"# best of '{study.study_name}': trial {trial.number}, "
        f"{objective} {trial.value!r} {_score_text(spec, TrialInfo.of(trial))}"
    )
    choice = confirmed_choice(study, spec)
    notes = [f"# {line}" for line in choice.lines()] if choice.confirmed else []
    if spec.is_objective_plugin:
        return _table([head, *notes], "search", trial.params)
    stored = stored_trial(study, spec, trial)
    values = {"epochs": _epochs(trial, spec), **_training_values(spec, stored)}
    return _table([f"{head}, seed {stored.seed}", *notes], "training", values)


def _score_text(spec: Spec, info: TrialInfo) -> str:
    """Where the value comes from on the trial's curve."""
    ran = "?" if info.epochs is None else info.epochs
    if info.score_epoch is None:  # an objective plugin, or a study from before scores
        return f"after {ran} epochs"
    if spec.study.score == "best_epoch":
        return f"at its best epoch, {info.score_epoch} of {ran}"
    if spec.study.score == "recent_mean":
        return f"as the mean of its last {spec.study.recent_epochs} epochs (of {ran})"
    return f"at its last epoch, {ran}"


def _training_values(spec: Spec, stored: StoredTrial) -> dict[str, Any]:
    """The trial's training parameters; ``cell`` only where sweeper builds the network."""
    values = stored.params.as_dict()
    if spec.task.model is not None:  # the spec's own model function builds the network
        values.pop("cell", None)
    return values


def ensure_refittable(study: optuna.Study, spec: Spec) -> None:
    """Refuse up front, before anything is printed, a study whose best trial cannot be
    trained again (an objective plugin, or a trial that recorded no training)."""
    stored_trial(study, spec, chosen_trial(study, spec))


def fixed_spec(study: optuna.Study, spec: Spec) -> str:
    """The stored spec's text with the search fixed at the best trial's values.

    The new study is named after the trial and runs one trial in a database of its own
    (beside the old one, never inside it). Its trial 0 trains with the seed derived from
    the study seed for trial 0, which is the best trial's own seed only when that was trial
    0; the head says so, and how to train with the very seed.
    """
    trial = chosen_trial(study, spec)
    name = f"{study.study_name}-trial-{trial.number}"
    settings: dict[str, Any] = {"name": name, "trials": 1, "workers": 1}
    if spec.study.sampler in SEARCHLESS_SAMPLERS:
        settings["sampler"] = SEARCHLESS_SAMPLERS[spec.study.sampler]
    head = [
        f"# trial {trial.number} of '{study.study_name}' ({_value_text(study, trial)}), "
        "its search fixed by sweeper best --spec"
    ]
    if spec.is_objective_plugin:
        search = {key: trial.params.get(key, value) for key, value in _stored_search(spec).items()}
        edit = SpecEdit(settings, ("storage",), {}, search)
        return fixed_text(spec.text, edit, head)
    stored = stored_trial(study, spec, trial)
    values = _training_values(spec, stored)
    training = {"epochs": _epochs(trial, spec), "threads": sweep_threads(spec)}
    training.update({key: values[key] for key in spec.search if key in values})
    edit = SpecEdit(settings, ("storage",), training, None)
    return fixed_text(spec.text, edit, head + _seed_lines(study, spec, stored))


def _value_text(study: optuna.Study, trial: FrozenTrial) -> str:
    return f"{StudyInfo.of(study).objective} {trial.value!r}"


def _stored_search(spec: Spec) -> dict[str, Any]:
    return dict(tomllib.loads(spec.text).get("search", {}))


def _seed_lines(study: optuna.Study, spec: Spec, stored: StoredTrial) -> list[str]:
    """Which seed the written spec's one trial trains with, against the best trial's."""
    seed = trial_seed(spec.study.seed, 0)
    if seed == stored.seed:
        return [f"# its one trial trains with trial {stored.number}'s seed {seed}: the same run"]
    location = redact(spec.storage_location)
    return [
        f"# its one trial trains with seed {seed} (study seed {spec.study.seed}, trial 0); but",
        f"# trial {stored.number} trained with seed {stored.seed}, "
        f"as sweeper replay {location} {stored.number} does",
    ]


def _table(head: list[str], name: str, values: Mapping[str, Any]) -> str:
    lines = [*head, f"[{name}]"] + [f"{key} = {toml_value(v)}" for key, v in values.items()]
    return "\n".join(lines)


def _epochs(trial: FrozenTrial, spec: Spec) -> int:
    """The epochs a final fit trains for: the score's epoch (a trial from before scores were
    recorded: the epochs it ran)."""
    info = TrialInfo.of(trial)
    epochs = info.score_epoch or info.epochs
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

    def held_out_outputs(self) -> torch.Tensor:
        """The final model's outputs on the held-out sequences (dropout off)."""
        data, model = self.refit.data("valid"), self.run.model
        model.eval()
        with torch.no_grad():
            outputs, _ = model(data.inputs, model.initial_state(len(data)))
        model.train()
        return outputs


def refit_best(
    study: optuna.Study, spec: Spec, on_epoch: Callable[[EpochRecord], None] | None = None
) -> Refit:
    """Train the best configuration, with its seed and the sweep's thread count, on train +
    valid for its score's epochs (so the same study always gives the same final model)."""
    trial = chosen_trial(study, spec)
    stored = stored_trial(study, spec, trial)
    task, build = training_setup(spec)
    refit = RefitTask(task)
    epochs = _epochs(trial, spec)
    with torch_threads(sweep_threads(spec)):
        run = TrialRun(refit, stored.params, stored.seed, build, stored.revision)
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
        *forecast_lines(result),
    ]


def forecast_lines(result: Refit) -> list[str]:
    """For a series task: the final model and the forecasting baselines in data units."""
    task, refit = result.task, result.refit
    if not forecast_scores.is_forecast(task):
        return []
    outputs = result.held_out_outputs()
    lines = forecast_scores.comparison_lines(task, outputs, refit.held_out)  # type: ignore[arg-type]
    return [f"# {line}" for line in lines]


def start_line(study: optuna.Study, spec: Spec) -> str:
    trial = chosen_trial(study, spec)
    return (
        f"# final fit of trial {trial.number} on training + validation data "
        f"for {_epochs(trial, spec)} epochs; the held-out split is scored once, at the end"
    )


def epoch_line(record: EpochRecord) -> str:
    """Training progress only: a held-out score per epoch would invite choosing by it."""
    return f"# epoch {record.epoch}: train loss {record.train_loss:.6g}"


def write_fixed_spec(study: optuna.Study, spec: Spec, path: Path) -> Path:
    """Write ``fixed_spec`` to a new file at ``path``, once it checks from there."""
    if path.exists():
        raise InputError(f"{path}: already exists; give --spec a new file name")
    text = fixed_spec(study, spec)
    try:  # relative paths (data files, model modules) are read beside the spec
        parse_spec(text, str(path))
    except SpecError as error:
        beside = Path(spec.source).parent
        raise InputError(
            f"{path}: {error.key}: {error.message} there; "
            f"write the fixed spec beside the study's spec, in {beside}/"
        ) from None
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path
