"""Open, create or continue a study on a storage URL; sampler, pruner and the trial queue."""

from __future__ import annotations

import dataclasses
import json
import math
import warnings
from collections import Counter
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import optuna
from optuna.trial import FrozenTrial, TrialState

from sweeper.errors import SpecChanged, StudyNotFound
from sweeper.seeds import new_stream, sampler_seed
from sweeper.spec.loading import parse_spec
from sweeper.spec.schedule import spec_schedule
from sweeper.spec.sections import (
    MUTABLE_KEYS,
    Spec,
    budget_of,
    renamed_keys_upgraded,
    spec_from_text,
)
from sweeper.spec.space import grid_points
from sweeper.store import tables
from sweeper.store.attrs import (
    StoredBaseline,
    StudyInfo,
    StudyLaunch,
    TrialInfo,
    continuation_system_attrs,
    continuation_user_attrs,
    set_stop_request,
    write_launch,
)
from sweeper.store.connect import open_storage, redact
from sweeper.sweep import confirmation
from sweeper.sweep.confirmation import searched_only
from sweeper.sweep.distinct_sampler import DistinctSampler

FINISHED = (TrialState.COMPLETE, TrialState.PRUNED)
# Random trials before TPE models the results. Early stopping makes them cheap but also
# makes sweeps short; optuna's 10 left TPE idle for most of a typical budget (measured in
# benchmarks/search_efficiency.py).
TPE_STARTUP_TRIALS = 5


def quiet_optuna() -> None:
    """optuna logs every trial and warns about its experimental features; we report ourselves."""
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)


def make_sampler(spec: Spec, worker_index: int, stream: int | None = None) -> DistinctSampler:
    """The spec's sampler for one worker start, drawing from a fresh stream (or ``stream``),
    wrapped so that it never proposes a configuration already finished or running."""
    stream = new_stream() if stream is None else stream
    base = _base_sampler(spec, sampler_seed(spec.study.seed, worker_index, stream))
    return DistinctSampler(base, spec.search, stream)


def _base_sampler(spec: Spec, seed: int) -> optuna.samplers.BaseSampler:
    name = spec.study.sampler
    if name == "tpe":
        # Constant liar keeps parallel workers from piling onto the same promising point.
        return optuna.samplers.TPESampler(
            seed=seed, multivariate=True, constant_liar=True, n_startup_trials=TPE_STARTUP_TRIALS
        )
    if name == "sobol":
        # One shared seed: the sequence is indexed by trial number, so workers never collide.
        return optuna.samplers.QMCSampler(qmc_type="sobol", scramble=True, seed=spec.study.seed)
    if name == "cmaes":
        # Stopped trials hold information too: without them CMA-ES waits for whole generations
        # of trials that ran to the end.
        return optuna.samplers.CmaEsSampler(seed=seed, consider_pruned_trials=True)
    # "random", and "grid", whose points arrive fully fixed through the queue.
    return optuna.samplers.RandomSampler(seed=seed)


def make_pruner(spec: Spec) -> optuna.pruners.BasePruner:
    rule = _rule_pruner(spec)
    patience = spec.stopping.patience
    if patience == 0:
        return rule or optuna.pruners.NopPruner()
    # A rule may stop a trial only after `patience` epochs without improvement; with no rule,
    # that alone stops it.
    return optuna.pruners.PatientPruner(rule, patience=patience)


def _rule_pruner(spec: Spec) -> optuna.pruners.BasePruner | None:
    rule = spec_schedule(spec)
    if rule.rule == "median":
        return optuna.pruners.MedianPruner(
            n_startup_trials=spec.stopping.warmup_trials, n_warmup_steps=rule.min_epochs
        )
    if rule.rule == "asha":
        return optuna.pruners.SuccessiveHalvingPruner(
            min_resource=rule.min_epochs, reduction_factor=rule.reduction
        )
    if rule.rule == "hyperband":
        # an objective plugin reports steps of its own: learn the longest from finished trials
        longest = "auto" if spec.is_objective_plugin else spec.training.epochs
        return optuna.pruners.HyperbandPruner(
            min_resource=rule.min_epochs, max_resource=longest, reduction_factor=rule.reduction
        )
    return None


def launch_attrs(
    spec: Spec, baseline: StoredBaseline | None, task: str, description: str, metric_name: str
) -> StudyLaunch:
    """What a launch of ``spec`` stores in its study: the spec as its file has it, so that a
    command-line override holds only for the launch that names it. ``create_or_continue``
    settles the budget once it sees the study."""
    in_file = as_in_file(spec)
    return StudyLaunch(
        spec_text=spec.text,
        spec_source=str(Path(spec.source).resolve()) if spec.source else "",
        spec_hash=spec.digest(),
        spec_data=in_file.canonical(),
        task=task,
        task_description=description,
        baseline=baseline,
        objective="value" if spec.is_objective_plugin else spec.study.objective,
        metric_name=metric_name,
        budget=spec.study.trials,
        workers=in_file.study.workers,
    )


def as_in_file(spec: Spec) -> Spec:
    """``spec`` without its command-line overrides (the values of its text)."""
    if not spec.overrides:
        return spec
    return spec_from_text(spec.text, spec.source)


def launch_budget(study: optuna.Study, spec: Spec) -> int:
    """The budget a launch stores: the stored one, unless this launch names another (with
    --trials, or by an edited ``study.trials`` in the file) that adds trials to the study.

    A launch that adds no trials leaves the stored budget alone, so an earlier --trials
    holds until another one raises it.
    """
    info = StudyInfo.of(study)
    if info.budget is None:  # a new study
        return spec.study.trials
    stored_trials = info.spec_data.get("study", {}).get("trials")
    edited = stored_trials != as_in_file(spec).study.trials
    if "trials" not in spec.overrides and not edited:
        return info.budget
    now = tally(study.get_trials(deepcopy=False))
    adds = budget_of(spec) > now.finished + now.running + now.waiting
    return spec.study.trials if adds else info.budget


def changed_keys(old: dict[str, Any], new: dict[str, Any], prefix: str = "") -> list[str]:
    keys: list[str] = []
    for key in sorted(set(old) | set(new)):
        dotted = f"{prefix}{key}"
        a, b = old.get(key), new.get(key)
        if isinstance(a, dict) or isinstance(b, dict):  # a section an older spec lacks: {}
            a, b = a if a is not None else {}, b if b is not None else {}
        if isinstance(a, dict) and isinstance(b, dict):
            keys += changed_keys(a, b, f"{dotted}.")
        elif a != b:
            keys.append(dotted)
    return keys


def create_or_continue(
    storage: optuna.storages.RDBStorage, spec: Spec, launch: StudyLaunch
) -> optuna.Study:
    """The study named in the spec; a different spec under the same name is refused."""
    names = set(optuna.get_all_study_names(storage))
    direction = optuna.study.StudyDirection.MINIMIZE
    if spec.study.better == "higher":
        direction = optuna.study.StudyDirection.MAXIMIZE
    study = optuna.create_study(
        storage=storage, study_name=spec.study.name, direction=direction, load_if_exists=True
    )
    if spec.study.name in names or "spec_hash" in study.user_attrs:  # or made just now
        _refuse_changed_spec(study, spec)
    tables.ensure_tables(storage.engine)
    write_launch(study, dataclasses.replace(launch, budget=launch_budget(study, spec)))
    set_stop_request(study, None)
    return study


def _refuse_changed_spec(study: optuna.Study, spec: Spec) -> None:
    info = StudyInfo.of(study)
    if info.spec_hash is None or info.spec_hash == spec.digest():
        return
    old = info.spec_data
    new = json.loads(json.dumps(spec.canonical(), sort_keys=True, default=str))
    changed = [k for k in changed_keys(old, new) if k not in MUTABLE_KEYS]
    raise SpecChanged(
        f"{spec.source}: the study '{spec.study.name}' was started with a different spec "
        f"(changed: {', '.join(changed) or 'unknown'}); undo the change or rename the study"
    )


def load_existing(
    location: str, study_name: str | None = None, *, read_only: bool = False
) -> tuple[optuna.Study, Spec]:
    """An existing study and the spec stored inside it (for resume, status, report, worker).

    ``read_only=True`` for commands that only read: the database is never written.
    """
    storage = open_storage(location, create=False, read_only=read_only)
    names = list(optuna.get_all_study_names(storage))
    if study_name is None:
        if len(names) != 1:
            found = ", ".join(names) or "none"
            raise StudyNotFound(f"{redact(location)}: expected one study, found {found}")
        study_name = names[0]
    if study_name not in names:
        raise StudyNotFound(f"{redact(location)}: no study named '{study_name}'")
    study = optuna.load_study(study_name=study_name, storage=storage)
    info = StudyInfo.of(study)
    if info.spec_text is None:
        raise StudyNotFound(f"{redact(location)}: '{study_name}' was not made by sweeper")
    spec = parse_spec(renamed_keys_upgraded(info.spec_text), info.spec_source or "<stored spec>")
    # the stored budget and worker count, which may differ from the stored text's; they are
    # the study's own settings, not a command line's
    spec = spec.with_overrides(trials=info.budget, workers=info.workers)
    spec = dataclasses.replace(spec, overrides=frozenset())
    return study, spec.with_overrides(storage=location)


@dataclass(frozen=True)
class Tally:
    """Trials of a study by state, as the budget sees them: the searched trials, and the
    confirmation trials (which the budget does not count) apart."""

    complete: int
    pruned: int
    failed: int
    running: int
    waiting: int
    interrupted: int = 0  # stopped by a signal; continued by the next launch
    confirmed: int = 0  # confirmation trials finished
    confirming: int = 0  # confirmation trials running or waiting

    @property
    def finished(self) -> int:
        return self.complete + self.pruned


def tally(trials: list[FrozenTrial]) -> Tally:
    extra = [t for t in trials if TrialInfo.of(t).is_confirmation]
    trials = searched_only(trials)
    counts = Counter(trial.state for trial in trials)
    interrupted = sum(
        1 for t in trials if t.state == TrialState.FAIL and TrialInfo.of(t).interrupted
    )
    return Tally(
        confirmed=sum(t.state in FINISHED for t in extra),
        confirming=sum(t.state in (TrialState.RUNNING, TrialState.WAITING) for t in extra),
        complete=counts[TrialState.COMPLETE],
        pruned=counts[TrialState.PRUNED],
        failed=counts[TrialState.FAIL] - interrupted,
        running=counts[TrialState.RUNNING],
        waiting=counts[TrialState.WAITING],
        interrupted=interrupted,
    )


def over_budget(trials: list[FrozenTrial], trial_number: int, budget: int) -> bool:
    """Whether a just-claimed trial would exceed the budget.

    Counts the finished trials and the running ones claimed before it (lower numbers), so
    that every worker agrees on which claim is the surplus one. Confirmation trials are not
    counted.
    """
    ahead = sum(
        1
        for t in searched_only(trials)
        if t.state in FINISHED or (t.state == TrialState.RUNNING and t.number < trial_number)
    )
    return ahead >= budget


def compute_seconds(trial: FrozenTrial) -> float:
    return TrialInfo.of(trial).compute_seconds or 0.0


@dataclass(frozen=True)
class ComputeUse:
    """Compute seconds of a study's trials as the compute budget sees them.

    Finished and running trials count; failed ones do not (a retry or a continuation carries
    the compute of the trial it stands for, so counting both would count it twice).
    """

    spent: float  # finished trials, and running ones so far
    committed: float  # as spent, with each running trial at least at the expected cost
    expected: float | None  # the next trial's cost: the mean of the finished trials


def compute_use(trials: list[FrozenTrial], before: int | None = None) -> ComputeUse:
    """``before``: count only the running trials claimed before that trial number.
    Confirmation trials are not counted: they are no part of the search's budget."""
    trials = searched_only(trials)
    done = [compute_seconds(t) for t in trials if t.state in FINISHED]
    running = [
        compute_seconds(t)
        for t in trials
        if t.state == TrialState.RUNNING and (before is None or t.number < before)
    ]
    expected = sum(done) / len(done) if done else None
    floor = expected or 0.0
    committed = sum(done) + sum(max(seconds, floor) for seconds in running)
    return ComputeUse(sum(done) + sum(running), committed, expected)


def compute_room(trials: list[FrozenTrial], spec: Spec, before: int | None = None) -> int | None:
    """How many more trials the compute budget allows (None: it sets no limit).

    A trial is launched only if its expected cost still fits. Before any trial has finished
    there is no estimate: then one trial per worker, while the budget is not yet spent.
    """
    if spec.study.compute_hours <= 0:
        return None
    limit = spec.study.compute_hours * 3600
    use = compute_use(trials, before)
    if not use.expected:
        return spec.study.workers if use.spent < limit else 0
    return max(0, math.floor((limit - use.committed) / use.expected))


def search_budget_met(trials: list[FrozenTrial], spec: Spec) -> bool:
    """The searched trials are finished, or no further one fits the compute budget."""
    return tally(trials).finished >= budget_of(spec) or compute_room(trials, spec) == 0


def search_over(trials: list[FrozenTrial], spec: Spec) -> bool:
    """The search budget is met and no searched trial runs or waits: confirmation may start."""
    now = tally(trials)
    return not (now.running or now.waiting) and search_budget_met(trials, spec)


def budget_met(trials: list[FrozenTrial], spec: Spec) -> bool:
    """Whether a worker may stop: the search budget is met and every confirmation trial it
    calls for is finished."""
    return search_budget_met(trials, spec) and not confirmation.unfinished(trials, spec)


def work_left(trials: list[FrozenTrial], spec: Spec) -> bool:
    """Searched trials still to finish, or confirmation trials."""
    searching = tally(trials).finished < budget_of(spec)
    return searching or bool(confirmation.unfinished(trials, spec))


def claim_exceeds_budget(trials: list[FrozenTrial], trial_number: int, spec: Spec) -> bool:
    """Whether a just-claimed trial exceeds the trial budget or the compute budget (a
    confirmation trial never does)."""
    claimed = next((t for t in trials if t.number == trial_number), None)
    if claimed is not None and TrialInfo.of(claimed).is_confirmation:
        return False
    if over_budget(trials, trial_number, budget_of(spec)):
        return True
    return compute_room(trials, spec, before=trial_number) == 0


def top_up(study: optuna.Study, spec: Spec) -> int:
    """Queue as many trials as the budget still needs; only the launching process calls this.

    Budget = finished (complete + pruned) + running + waiting; failed trials do not count, so a
    failure is replaced. Under a compute budget at most one trial per worker waits or runs, so
    each launch decision uses the latest cost estimate. Once the search is over, the
    confirmation trials it calls for are queued too. Returns the number queued.
    """
    before = tally(study.get_trials(deepcopy=False))
    # continuations count against the budget too: never queue one beyond it
    requeue_interrupted(study, budget_of(spec) - before.finished - before.running - before.waiting)
    trials = study.get_trials(deepcopy=False)
    now = tally(trials)
    need = budget_of(spec) - now.finished - now.running - now.waiting
    room = compute_room(trials, spec)
    if room is not None:
        need = min(need, room - now.waiting, spec.study.workers - now.running - now.waiting)
    if need > 0:
        if spec.study.sampler == "grid":
            return _queue_grid_points(study, spec, trials, need)
        for _ in range(need):
            study.enqueue_trial({})
        return need
    if not search_over(trials, spec):
        return 0
    return confirmation.queue_missing(study, spec, trials)


def _queue_grid_points(
    study: optuna.Study, spec: Spec, trials: list[FrozenTrial], need: int
) -> int:
    def key(params: dict[str, Any]) -> str:
        return json.dumps(params, sort_keys=True, default=str)

    taken = {
        key(TrialInfo.of(trial).fixed_params or trial.params)
        for trial in trials
        if trial.state != TrialState.FAIL
    }
    queued = 0
    for point in grid_points(spec.search) or []:
        if queued == need:
            break
        if key(point) not in taken:
            study.enqueue_trial(point)
            queued += 1
    return queued


def request_stop(study: optuna.Study, reason: str) -> None:
    set_stop_request(study, reason)


def stop_requested(study: optuna.Study) -> str | None:
    return StudyInfo.of(study).stop_request


def requeue_interrupted(study: optuna.Study, limit: int | None = None) -> int:
    """Queue again, with the same parameters, every trial a stop interrupted (at most
    ``limit`` searched trials, oldest first; confirmation trials are outside the budget).

    The new trial records which trial it continues in the same system attributes optuna's
    heartbeat retry uses, so it loads that trial's checkpoint. Each continuation lengthens
    the retry history that ``study.max_retries`` is checked against.
    """
    trials = study.get_trials(deepcopy=False)
    continued = {number for t in trials for number in TrialInfo.of(t).retry_history}
    queued = 0
    searched = 0
    for trial in trials:
        info = TrialInfo.of(trial)
        if trial.state != TrialState.FAIL or not info.interrupted or trial.number in continued:
            continue
        if not info.is_confirmation:
            if limit is not None and searched >= limit:
                continue
            searched += 1
        study.add_trial(
            optuna.create_trial(
                state=TrialState.WAITING,
                params=trial.params,
                distributions=trial.distributions,
                user_attrs=continuation_user_attrs(info),
                system_attrs=continuation_system_attrs(info),
            )
        )
        queued += 1
    return queued
