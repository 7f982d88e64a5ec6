"""One optuna trial end to end: draw parameters, train (or call the plugin), record, report."""

from __future__ import annotations

import math
import os
import socket
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import optuna
import sqlalchemy as sa
import torch

from sweeper.seeds import confirmation_seed, trial_seed
from sweeper.spec.schedule import spec_schedule
from sweeper.spec.sections import Spec
from sweeper.spec.space import draw
from sweeper.store import attrs, checkpoints, epoch_rows
from sweeper.store.attrs import TrialInfo
from sweeper.sweep.distinct_sampler import SpaceExhausted, draw_outcome
from sweeper.tasks.base import Task
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.epoch_record import EpochRecord
from sweeper.training.model_plugin import section_model_builder
from sweeper.training.numerics import current_revision
from sweeper.training.params import TrialParams
from sweeper.training.score import Score, score_curve
from sweeper.training.trial_run import TrialRun, saved_revision

Objective = Callable[[dict[str, Any], Callable[[int, float], None]], float]
TRACEBACK_LINES = 12


def worker_name(index: int) -> str:
    return f"{socket.gethostname()}:{os.getpid()}:w{index}"


@dataclass
class TrialContext:
    """What every trial of one worker shares."""

    spec: Spec
    engine: sa.Engine
    study_name: str
    worker: str
    task: Task | None = None
    objective: Objective | None = None
    should_stop: Callable[[], bool] = field(default=lambda: False)


def objective_value(spec: Spec, record: EpochRecord) -> float:
    return record.valid_metric if spec.study.objective == "valid_metric" else record.valid_loss


def trial_score(spec: Spec, records: tuple[EpochRecord, ...]) -> Score:
    """The score the spec asks for, from the whole curve (a continued trial's included)."""
    values = [objective_value(spec, record) for record in records]
    study = spec.study
    return score_curve(values, study.score, study.better, study.recent_epochs)


def worst_value(spec: Spec) -> float:
    return math.inf if spec.study.better == "lower" else -math.inf


def run_trial(trial: optuna.Trial, ctx: TrialContext) -> float:
    """Run one trial; raise optuna.TrialPruned when stopped early or diverged."""
    params = _draw_distinct(trial, ctx.spec)
    info = TrialInfo.live(trial)
    origin = info.origin  # the trial it retries or continues, or itself
    seed = _seed_of(ctx.spec, info)
    attrs.record_start(trial, seed, ctx.worker, origin)
    if ctx.spec.is_objective_plugin:
        return _run_objective(trial, ctx, params, info.is_confirmation)
    return _run_training(trial, ctx, params, seed, origin)


def _seed_of(spec: Spec, info: TrialInfo) -> int:
    """A searched trial's seed follows its origin's number; a confirmation trial's, the
    searched trial it repeats and its round (a fresh seed, the same for its retries)."""
    if info.confirms is not None and info.confirm_round is not None:
        return confirmation_seed(spec.study.seed, info.confirms, info.confirm_round)
    return trial_seed(spec.study.seed, info.origin)


def _draw_distinct(trial: optuna.Trial, spec: Spec) -> dict[str, Any]:
    """The trial's parameters, never a copy of a finished or running trial's (the sampler
    refused copies when the trial started); stops the sweep when none is left."""
    outcome = draw_outcome(trial)
    if outcome is not None and outcome.exhausted:
        reason = (
            f"{spec.source}: search: every configuration of the search space has been run "
            "or is running; widen the space or lower the budget"
        )
        attrs.set_stop_request(trial.study, reason)
        raise SpaceExhausted(reason)
    params = draw(trial, spec.search)
    if outcome is not None:
        attrs.record_draw(trial, outcome.stream, outcome.redraws)
    return params


def _continue_from(trial: optuna.Trial, ctx: TrialContext, run: TrialRun, state: Any) -> None:
    """Load the origin trial's latest state and replay its recorded epochs into this trial."""
    run.load_state_dict(state)
    for record in run.records:
        epoch_rows.write_epoch(ctx.engine, ctx.study_name, trial.number, record)
        trial.report(objective_value(ctx.spec, record), record.epoch)
    attrs.record_resumed(trial, run.epoch)
    # A retry inherits its original's attributes, which lag when the worker died between
    # saving a checkpoint and recording its epoch; with no epoch left to run, nothing else
    # would correct them.
    attrs.record_progress(trial, run.epoch, sum(record.seconds for record in run.records))


class EpochReporter:
    """What a sweep does after each epoch of a trial, in the order studies rely on.

    ``record``: the epoch row, the checkpoint, then the ``epochs`` and ``compute_seconds``
    attributes, before anything can end the trial. ``stop_reason`` (healthy epochs only): the
    intermediate value, then the stopping rule's question.
    """

    def __init__(self, trial: optuna.Trial, ctx: TrialContext, run: TrialRun, origin: int) -> None:
        self._trial, self._ctx, self._run, self._origin = trial, ctx, run, origin
        self.compute = sum(record.seconds for record in run.records)
        self.schedule = spec_schedule(ctx.spec)
        # a confirmation trial measures its configuration to the end: nothing stops it early
        self.may_stop = not TrialInfo.live(trial).is_confirmation

    def record(self, record: EpochRecord) -> None:
        ctx, trial, epoch = self._ctx, self._trial, record.epoch
        epoch_rows.write_epoch(ctx.engine, ctx.study_name, trial.number, record)
        checkpoints.save(ctx.engine, ctx.study_name, self._origin, epoch, self._run.state_dict())
        self.compute += record.seconds
        attrs.record_progress(trial, epoch, self.compute)

    def stop_reason(self, record: EpochRecord) -> str | None:
        # the stopping rule decides on each epoch's own value, whatever the score
        self._trial.report(objective_value(self._ctx.spec, record), record.epoch)
        if self.may_stop and self._may_stop(record.epoch) and self._trial.should_prune():
            return f"stopped early after epoch {record.epoch}"
        return None

    def _may_stop(self, epoch: int) -> bool:
        """Whether the stopping rule can decide now (asking optuna costs a few milliseconds)."""
        spec = self._ctx.spec
        stops = self.schedule.rule != "none" or spec.stopping.patience > 0  # patience alone
        return stops and self.schedule.min_epochs <= epoch < spec.training.epochs

    def score(self) -> Score:
        """The trial's score, its epoch recorded as ``score_epoch``."""
        score = trial_score(self._ctx.spec, self._run.records)
        attrs.record_score_epoch(self._trial, score.epoch)
        return score


def _run_training(
    trial: optuna.Trial, ctx: TrialContext, params: dict, seed: int, origin: int
) -> float:
    assert ctx.task is not None, "a training trial needs its task"
    training = TrialParams.from_mapping({**ctx.spec.training.defaults, **params})
    # a continuation keeps the numerics its origin's checkpoint was trained with
    state = checkpoints.load(ctx.engine, ctx.study_name, origin)
    revision = current_revision() if state is None else saved_revision(state)
    attrs.record_training(trial, training.as_dict(), torch.get_num_threads(), revision)
    build = section_model_builder(ctx.spec.task, ctx.spec.base_dir, ctx.spec.source)
    run = TrialRun(ctx.task, training, seed, build, revision)
    if state is not None:
        _continue_from(trial, ctx, run, state)
    reporter = EpochReporter(trial, ctx, run, origin)
    end = run_epochs(
        run,
        ctx.spec.training.epochs,
        on_epoch=[reporter.record],
        stop_after=reporter.stop_reason,
        should_stop=ctx.should_stop,
    )
    reason = end.reason or end.how
    score = reporter.score()
    if end.how == "diverged":
        # the sampler must learn that this region is bad
        attrs.record_diverged(trial, reason)
        trial.report(worst_value(ctx.spec), end.epoch)
        trial.should_prune()  # the stopping rule records it too (ASHA ranks it in its rung)
        raise optuna.TrialPruned(reason)
    if end.how == "stopped":
        attrs.record_end(trial, reason)
        raise optuna.TrialPruned(reason)
    attrs.record_end(trial, "completed")
    return score.value


def _plugin_record(epoch: int, value: float) -> EpochRecord:
    nan = math.nan
    return EpochRecord(epoch, nan, value, nan, nan, nan, nan, nan, nan, 0, 0, nan, nan)


def _run_objective(
    trial: optuna.Trial, ctx: TrialContext, params: dict, confirming: bool = False
) -> float:
    assert ctx.objective is not None, "an objective-plugin trial needs its function"

    def report(epoch: int, value: float) -> None:
        epoch_rows.write_epoch(
            ctx.engine, ctx.study_name, trial.number, _plugin_record(epoch, value)
        )
        attrs.record_progress(trial, epoch)
        trial.report(float(value), epoch)
        if not confirming and trial.should_prune():
            reason = f"stopped early after step {epoch}"
            attrs.record_end(trial, reason)
            raise optuna.TrialPruned(reason)

    value = float(ctx.objective(dict(params), report))
    attrs.record_end(trial, "completed")
    return value


def failure_attrs(error: BaseException) -> dict[str, str]:
    """Type, message and the last lines of the traceback of a failed trial."""
    lines = traceback.format_exception(type(error), error, error.__traceback__)
    excerpt = "".join(lines).splitlines()[-TRACEBACK_LINES:]
    return {"type": type(error).__name__, "message": str(error), "traceback": "\n".join(excerpt)}
