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
    note: str  # why nothing could be estimated; empty when rows are meaningful


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
    """Importance of every varying parameter over the completed trials, with intervals."""
    done = tables.completed()
    varying, fixed = _split_varying(done)
    empty = ImportanceResult((), len(done), 0, level, fixed, "")
    if len(done) < MIN_TRIALS:
        note = f"needs at least {MIN_TRIALS} completed trials; the study has {len(done)}"
        return _with_note(empty, note)
    if not varying:
        return _with_note(empty, "no searched parameter took more than one value")
    shared: dict[BaseDistribution, BaseDistribution] = {}
    trials = [_frozen(i, row, varying, shared) for i, row in enumerate(done)]
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
    return ImportanceResult(tuple(rows), len(done), replicates, level, fixed, "")


def _with_note(result: ImportanceResult, note: str) -> ImportanceResult:
    return ImportanceResult((), result.trials_used, 0, result.level, result.fixed, note)


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
        value=row.value,
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
