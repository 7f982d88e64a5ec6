"""A stored trial made runnable again: its parameters, seed, task, model and thread count."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass

import optuna
import torch
from optuna.trial import FrozenTrial

from sweeper.errors import InputError
from sweeper.seeds import trial_seed
from sweeper.spec.checks import build_spec_task
from sweeper.spec.sections import Spec
from sweeper.store.attrs import TrialInfo
from sweeper.store.trial_words import trial_word
from sweeper.sweep.workers import default_threads
from sweeper.tasks.base import Task
from sweeper.training.model_plugin import section_model_builder
from sweeper.training.models import ModelBuilder
from sweeper.training.numerics import (
    REVISIONS,
    TORCH_MODULES,
    RevisionUnavailable,
    check_runnable,
)
from sweeper.training.params import TrialParams


@dataclass(frozen=True)
class StoredTrial:
    """What a trial stored about its training: enough to run it again."""

    study_name: str
    trial: FrozenTrial
    params: TrialParams
    seed: int
    revision: str  # the trainer's numerics revision it trained with

    @property
    def number(self) -> int:
        return self.trial.number


def find_trial(study: optuna.Study, number: int) -> FrozenTrial:
    trials = study.get_trials(deepcopy=False)
    for trial in trials:
        if trial.number == number:
            return trial
    last = f"0 to {len(trials) - 1}" if trials else "none yet"
    raise InputError(f"study '{study.study_name}' has no trial {number} (trials: {last})")


def stored_trial(study: optuna.Study, spec: Spec, trial: FrozenTrial) -> StoredTrial:
    """The trial's training parameters and seed; a retry's seed is its origin's."""
    if spec.is_objective_plugin:
        raise InputError(
            f"study '{study.study_name}' runs an objective plugin ({spec.task.function}); "
            "only trials that sweeper trains can be retrained"
        )
    info = TrialInfo.of(trial)
    training = info.training
    if training is None:
        raise InputError(
            f"trial {trial.number} of '{study.study_name}' never started training "
            f"({trial_word(trial)}); pick a trial that recorded epochs"
        )
    seed = info.seed
    if seed is None:
        origin = trial.number if info.retry_of is None else info.retry_of
        seed = trial_seed(spec.study.seed, origin)
    revision = info.trainer or TORCH_MODULES  # recorded since the trainer had two
    if revision not in REVISIONS:
        raise InputError(
            f"trial {trial.number} of '{study.study_name}' was trained with trainer revision "
            f"{revision!r}, which this sweeper does not have; retrain it with the sweeper "
            "version that ran the study"
        )
    try:
        check_runnable(revision)
    except RevisionUnavailable as error:
        raise InputError(
            f"trial {trial.number} of '{study.study_name}': {error}; install a C++ compiler "
            "(g++ or clang++, or set CXX) to build them"
        ) from None
    params = TrialParams.from_mapping(training)
    return StoredTrial(study.study_name, trial, params, seed, revision)


def training_setup(spec: Spec) -> tuple[Task, ModelBuilder]:
    """The spec's task and model builder, as every worker of the study built them."""
    return build_spec_task(spec), section_model_builder(spec.task, spec.base_dir, spec.source)


def sweep_threads(spec: Spec) -> int:
    """The torch thread count the study's workers trained with on this machine."""
    return spec.training.threads or default_threads(spec.study.workers)


@contextmanager
def torch_threads(count: int) -> Iterator[None]:
    """Train with ``count`` torch threads, then put the caller's count back."""
    previous = torch.get_num_threads()
    torch.set_num_threads(count)
    try:
        yield
    finally:
        torch.set_num_threads(previous)
