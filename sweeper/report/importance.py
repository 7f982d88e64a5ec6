"""Which hyperparameters mattered: PED-ANOVA importances with bootstrap intervals.

We use optuna's ``PedAnovaImportanceEvaluator``: it needs no extra package (fANOVA needs
scikit-learn, which sweeper does not depend on) and it asks the question a sweep cares
about, namely which parameters set the best quarter of trials apart from the rest. The
evaluator itself is deterministic; the seed drives the bootstrap resampling of trials.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Container, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import optuna
from optuna.distributions import BaseDistribution
from optuna.importance import PedAnovaImportanceEvaluator, get_param_importances
from optuna.trial import FrozenTrial, TrialState

from sweeper.report.collect import StudyTables, TrialRow

TOP_QUANTILE = 0.25
MIN_TRIALS = 8  # the best quarter must hold at least two trials
REPLICATES = 100
LEVEL = 0.95
Direction = Literal["minimize", "maximize"]


@dataclass(frozen=True)
class Importance:
    """A parameter's share of the total importance and its bootstrap percentile interval."""

    name: str
    share: float
    low: float
    high: float


@dataclass(frozen=True)
class ImportanceResult:
    rows: tuple[Importance, ...]  # most important first
    trials_used: int
    replicates: int
    level: float
    fixed: tuple[str, ...]  # searched parameters that held one value in every completed trial
    # without rows: why nothing could be estimated; with rows: why they cannot be ranked
    # (empty when the ranking stands)
    note: str
    epoch: int | None = None  # the epoch the trials were compared at; None: their own values
    stopped_used: int = 0  # of ``trials_used``, the trials a stopping rule ended early
    ranked: bool = True  # False when the top two parameters' intervals overlap

    @property
    def basis(self) -> str:
        """Which values the importance rests on, in words."""
        if self.epoch is None:
            return f"the final values of {self.trials_used} completed trials"
        stopped = f", {self.stopped_used} of them stopped early" if self.stopped_used else ""
        return f"the values at epoch {self.epoch} of {self.trials_used} trials{stopped}"


class _TrialSample(optuna.Study):
    """A read-only study whose trials are a given list (the data or a bootstrap replicate)."""

    def __init__(self, direction: Direction) -> None:
        storage = optuna.storages.InMemoryStorage()
        # Creating a study logs a line at INFO; this one is internal, so keep it quiet.
        verbosity = optuna.logging.get_verbosity()
        optuna.logging.set_verbosity(optuna.logging.WARNING)
        try:
            optuna.create_study(storage=storage, study_name="sample", direction=direction)
        finally:
            optuna.logging.set_verbosity(verbosity)
        super().__init__(study_name="sample", storage=storage)
        self.sample: list[FrozenTrial] = []

    def get_trials(
        self,
        deepcopy: bool = True,
        states: Container[TrialState] | None = None,
    ) -> list[FrozenTrial]:
        return [t for t in self.sample if states is None or t.state in states]


def param_importance(
    tables: StudyTables,
    *,
    replicates: int = REPLICATES,
    seed: int = 0,
    level: float = LEVEL,
) -> ImportanceResult:
    """Importance of every varying parameter over the finished trials, with intervals."""
    sample = shared_epoch_sample(tables)
    done = [row for row, _ in sample.values]
    varying, fixed = _split_varying(done)
    empty = ImportanceResult(
        (), len(done), 0, level, fixed, "", sample.epoch, sample.stopped
    )  # fmt: skip
    if len(done) < MIN_TRIALS:
        return _with_note(empty, sample.shortfall)
    if not varying:
        return _with_note(empty, "no searched parameter took more than one value")
    shared: dict[BaseDistribution, BaseDistribution] = {}
    trials = [
        _frozen(i, row, value, varying, shared) for i, (row, value) in enumerate(sample.values)
    ]
    study = _TrialSample(tables.summary.direction)
    point = _shares(study, trials, varying)
    if not any(point.values()):
        note = "no parameter set the best quarter of trials apart from the rest"
        return _with_note(empty, note)
    draws = _bootstrap(study, trials, varying, replicates, seed)
    tail = (1.0 - level) / 2.0 * 100.0
    low, high = np.percentile(draws, [tail, 100.0 - tail], axis=0)
    rows = [
        Importance(name, point[name], float(low[i]), float(high[i]))
        for i, name in enumerate(varying)
    ]
    rows.sort(key=lambda r: (-r.share, r.name))
    ranked, note = _ranking(rows)
    return ImportanceResult(
        tuple(rows), len(done), replicates, level, fixed, note, sample.epoch, sample.stopped,
        ranked,
    )  # fmt: skip


def _ranking(rows: Sequence[Importance]) -> tuple[bool, str]:
    """Whether the top parameter stands apart: its interval clear of the runner-up's."""
    if len(rows) < 2 or rows[0].low > rows[1].high:
        return True, ""
    first, second = rows[0], rows[1]
    return False, (
        f"the intervals of {first.name} ({first.low:.0%} to {first.high:.0%}) and "
        f"{second.name} ({second.low:.0%} to {second.high:.0%}) overlap: "
        "they cannot be ranked"
    )


def _with_note(result: ImportanceResult, note: str) -> ImportanceResult:
    return ImportanceResult(
        (), result.trials_used, 0, result.level, result.fixed, note, result.epoch,
        result.stopped_used,
    )  # fmt: skip


@dataclass(frozen=True)
class EpochSample:
    """The trials importance compares and each one's value; ``epoch`` None: final values."""

    values: tuple[tuple[TrialRow, float], ...]
    epoch: int | None
    stopped: int
    shortfall: str  # why there are too few, in words (used when there are)


def shared_epoch_sample(tables: StudyTables) -> EpochSample:
    """Every finished configuration's value at the deepest epoch that at least
    ``MIN_TRIALS`` of them reached, from their recorded curves (stopped trials included;
    a non-finite value, as a diverged trial's last, is left out). A study whose trials
    recorded no curve (plain optuna) is compared by the completed trials' values."""
    # a confirmation trial repeats a searched configuration: it would count it twice
    finished = [
        t for t in tables.trials if t.state in ("COMPLETE", "PRUNED") and t.confirms is None
    ]
    if not any(row.curve for row in finished):
        done = [row for row in finished if row.state == "COMPLETE" and math.isfinite(row.value)]
        why = f"needs at least {MIN_TRIALS} completed trials; the study has {len(done)}"
        return EpochSample(tuple((row, row.value) for row in done), None, 0, why)
    at: dict[int, list[tuple[TrialRow, float]]] = {}
    for row in finished:
        for epoch, value in row.curve:
            if math.isfinite(value):
                at.setdefault(epoch, []).append((row, value))
    reached = [epoch for epoch, rows in at.items() if len(rows) >= MIN_TRIALS]
    epoch = max(reached) if reached else max(at, key=lambda e: (len(at[e]), e), default=0)
    values = at.get(epoch, [])
    stopped = sum(1 for row, _ in values if row.state == "PRUNED")
    why = (
        f"needs at least {MIN_TRIALS} trials that reached one epoch; "
        f"at most {len(values)} of the {len(finished)} finished trials did"
    )
    return EpochSample(tuple(values), epoch, stopped, why)


def _split_varying(done: Sequence[TrialRow]) -> tuple[list[str], tuple[str, ...]]:
    seen: dict[str, set[str]] = {}
    for row in done:
        for name, value in row.params.items():
            seen.setdefault(name, set()).add(repr(value))
    varying = sorted(name for name, values in seen.items() if len(values) > 1)
    fixed = tuple(sorted(name for name, values in seen.items() if len(values) == 1))
    return varying, fixed


def _frozen(
    trial_id: int,
    row: TrialRow,
    value: float,
    names: Sequence[str],
    shared: dict[BaseDistribution, BaseDistribution],
) -> FrozenTrial:
    # The evaluator tells trials apart by id, so every trial needs its own; it also groups
    # trials by distribution, which is much faster when equal distributions are one object.
    keep = [name for name in names if name in row.params and name in row.distributions]
    dists = {
        name: shared.setdefault(row.distributions[name], row.distributions[name]) for name in keep
    }
    return FrozenTrial(
        number=trial_id,
        state=TrialState.COMPLETE,
        value=value,
        datetime_start=None,
        datetime_complete=None,
        params={name: row.params[name] for name in keep},
        distributions=dists,
        user_attrs={},
        system_attrs={},
        intermediate_values={},
        trial_id=trial_id,
    )


def _shares(
    study: _TrialSample, trials: Sequence[FrozenTrial], names: Sequence[str]
) -> dict[str, float]:
    """Raw PED-ANOVA importances normalised to sum to one (all zero when none stands out)."""
    present = sorted({name for t in trials for name in t.params} & set(names))
    study.sample = list(trials)
    with warnings.catch_warnings():
        # Small or conditional samples make the evaluator warn; the interval shows that already.
        warnings.simplefilter("ignore")
        raw = get_param_importances(
            study,
            evaluator=PedAnovaImportanceEvaluator(target_quantile=TOP_QUANTILE),
            params=present,
            normalize=False,
        )
    total = sum(v for v in raw.values() if math.isfinite(v))
    return {name: (raw.get(name, 0.0) / total if total > 0 else 0.0) for name in names}


def _bootstrap(
    study: _TrialSample,
    trials: Sequence[FrozenTrial],
    names: Sequence[str],
    replicates: int,
    seed: int,
) -> np.ndarray:
    """Shares recomputed on trials resampled with replacement: one row per replicate."""
    rng = np.random.default_rng(seed)
    draws = np.zeros((max(replicates, 1), len(names)))
    for b in range(replicates):
        sample = [trials[i] for i in rng.integers(0, len(trials), len(trials))]
        shares = _shares(study, sample, names)
        draws[b] = [shares[name] for name in names]
    return draws
