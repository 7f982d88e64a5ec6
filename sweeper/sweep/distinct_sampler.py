"""A sampler that never proposes a configuration the study has finished or is running.

Optuna fixes a trial's parameters when they are suggested, so the refusal happens before:
the wrapper draws the whole configuration at once (optuna's "relative" draw, made when a
trial starts), compares it with every finished and running trial, and draws again while it
is a copy. Queued trials (grid points, retries and continuations) bring fixed parameters and
are passed through untouched: they are the same configuration by design.
"""

from __future__ import annotations

import math
import random
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import optuna
from optuna.distributions import BaseDistribution
from optuna.samplers import BaseSampler, RandomSampler
from optuna.trial import FrozenTrial, TrialState

from sweeper.errors import RunFailure
from sweeper.spec.space import SearchEntry, distributions, grid_points, grid_size
from sweeper.store.attrs import TrialInfo

SAMPLER_TRIES = 10  # draws from the study's own sampler before falling back to uniform
UNIFORM_TRIES = 100  # uniform draws before a space without a small grid counts as used up
ENUMERATE_LIMIT = 100_000  # grids up to this size are listed to pick an unused point
TAKEN_STATES = (TrialState.COMPLETE, TrialState.PRUNED, TrialState.RUNNING)


class SpaceExhausted(RunFailure):
    """Every configuration of the search space has been finished or is running."""


@dataclass(frozen=True)
class DrawOutcome:
    """How a trial's configuration was found: the sampler stream and how often it redrew."""

    stream: int
    redraws: int
    exhausted: bool = False


def config_key(params: Mapping[str, Any], names: Sequence[str]) -> tuple[str, ...]:
    """A configuration's identity; floats rounded so a grid value and its stored copy match."""
    return tuple(repr(_normal(params.get(name))) for name in names)


def _normal(value: Any) -> Any:
    if isinstance(value, float) and math.isfinite(value):
        return round(value, 10)
    return value


class DistinctSampler(BaseSampler):
    """Wraps the study's sampler; ``stream`` is the fresh seed this worker start drew from."""

    def __init__(self, base: BaseSampler, space: Mapping[str, SearchEntry], stream: int) -> None:
        self.base = base
        self.stream = stream
        self._space = distributions(space)
        self._names = list(self._space)
        self._grid = _small_grid(space)
        self._uniform = RandomSampler(seed=stream)
        self._pick = random.Random(stream)
        self._outcomes: dict[int, DrawOutcome] = {}

    def outcome(self, trial_number: int) -> DrawOutcome:
        return self._outcomes.get(trial_number, DrawOutcome(self.stream, 0))

    def infer_relative_search_space(
        self, study: optuna.Study, trial: FrozenTrial
    ) -> dict[str, BaseDistribution]:
        return dict(self._space)  # the whole configuration, so it can be refused as a whole

    def sample_relative(
        self, study: optuna.Study, trial: FrozenTrial, search_space: dict[str, BaseDistribution]
    ) -> dict[str, Any]:
        if not search_space:
            return {}
        fixed = TrialInfo.of(trial).fixed_params or {}
        if all(name in fixed for name in self._names):
            return self._from_base(study, trial)  # a retry or a grid point: fixed values win
        taken = _taken(study, trial.number, self._names)
        params, redraws = self._distinct(study, trial, taken, fixed)
        exhausted = params is None
        self._outcomes[trial.number] = DrawOutcome(self.stream, redraws, exhausted)
        return params or {}

    def sample_independent(
        self,
        study: optuna.Study,
        trial: FrozenTrial,
        param_name: str,
        param_distribution: BaseDistribution,
    ) -> Any:
        return self.base.sample_independent(study, trial, param_name, param_distribution)

    def before_trial(self, study: optuna.Study, trial: FrozenTrial) -> None:
        self.base.before_trial(study, trial)

    def after_trial(
        self,
        study: optuna.Study,
        trial: FrozenTrial,
        state: TrialState,
        values: Sequence[float] | None,
    ) -> None:
        self.base.after_trial(study, trial, state, values)

    def reseed_rng(self) -> None:
        self.base.reseed_rng()

    def _distinct(
        self,
        study: optuna.Study,
        trial: FrozenTrial,
        taken: set[tuple[str, ...]],
        fixed: Mapping[str, Any],
    ) -> tuple[dict[str, Any] | None, int]:
        """A configuration outside ``taken`` and the number of refused draws, or None.
        ``fixed``: values queued with the trial, which win over drawn ones."""

        def fresh(params: Mapping[str, Any]) -> bool:
            return config_key({**params, **fixed}, self._names) not in taken

        if self._grid is not None and len(taken) >= len(self._grid):
            return None, 0  # cheap exit before any draw: every point is used
        for redraws in range(SAMPLER_TRIES):
            params = self._from_base(study, trial)
            if fresh(params):
                return params, redraws
        if self._grid is not None:
            unused = [point for point in self._grid if fresh(point)]
            return (self._pick.choice(unused) if unused else None), SAMPLER_TRIES
        for extra in range(UNIFORM_TRIES):
            params = self._uniform_draw(study, trial)
            if fresh(params):
                return params, SAMPLER_TRIES + extra
        return None, SAMPLER_TRIES + UNIFORM_TRIES

    def _from_base(self, study: optuna.Study, trial: FrozenTrial) -> dict[str, Any]:
        inner = self.base.infer_relative_search_space(study, trial)
        inner = {name: d for name, d in inner.items() if name in self._space}
        params = dict(self.base.sample_relative(study, trial, inner)) if inner else {}
        for name, distribution in self._space.items():
            if name not in params:
                params[name] = self.base.sample_independent(study, trial, name, distribution)
        return params

    def _uniform_draw(self, study: optuna.Study, trial: FrozenTrial) -> dict[str, Any]:
        return {
            name: self._uniform.sample_independent(study, trial, name, distribution)
            for name, distribution in self._space.items()
        }


def _small_grid(space: Mapping[str, SearchEntry]) -> list[dict[str, Any]] | None:
    size = grid_size(space)
    if size is None or size > ENUMERATE_LIMIT:
        return None
    return grid_points(space)


def _taken(study: optuna.Study, number: int, names: Sequence[str]) -> set[tuple[str, ...]]:
    """The configurations of every finished and running trial but ``number`` itself."""
    trials = study.get_trials(deepcopy=False, states=TAKEN_STATES)
    return {config_key(t.params, names) for t in trials if t.number != number and t.params}


def draw_outcome(trial: optuna.Trial) -> DrawOutcome | None:
    """How the trial's configuration was drawn, when its study samples through the wrapper."""
    sampler = trial.study.sampler
    if not isinstance(sampler, DistinctSampler):
        return None
    _ = trial.relative_params  # optuna draws the whole configuration on first use; draw it now
    return sampler.outcome(trial.number)
