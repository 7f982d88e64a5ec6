"""Confirmation trials: after the search, the best configurations trained again with fresh seeds.

A confirmation trial is an ordinary trial of the study, queued with the parameters of the
searched trial it repeats and two user attributes (``confirms``, ``confirm_round``; see
``sweeper.store.attrs``) that fix its seed. It is not counted in the search budget and no
stopping rule ends it early. Which configurations need one is a function of the stored
trials alone, so every worker and every launch agrees, and a later top-up of the search
(``--trials``) re-confirms whatever has become the best.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import optuna
from optuna.trial import FrozenTrial, TrialState

from sweeper.spec.sections import Spec
from sweeper.store.attrs import TrialInfo, confirmation_user_attrs
from sweeper.sweep.distinct_sampler import config_key


@dataclass(frozen=True)
class Planned:
    """One confirmation trial the study needs: round ``round`` of ``searched``'s parameters."""

    searched: int
    round: int


def is_confirmation(trial: FrozenTrial) -> bool:
    return TrialInfo.of(trial).is_confirmation


def searched_only(trials: Sequence[FrozenTrial]) -> list[FrozenTrial]:
    """The trials of the search itself (what the search budget counts)."""
    return [t for t in trials if not is_confirmation(t)]


def ranked_searched(trials: Sequence[FrozenTrial], spec: Spec) -> list[FrozenTrial]:
    """Complete searched trials with a finite value, best first, one per configuration."""
    done = [
        t
        for t in searched_only(trials)
        if t.state == TrialState.COMPLETE and t.value is not None and math.isfinite(t.value)
    ]
    sign = 1.0 if spec.study.better == "lower" else -1.0
    done.sort(key=lambda t: (sign * float(t.value or 0.0), t.number))
    best: list[FrozenTrial] = []
    seen: set[tuple[str, ...]] = set()
    for trial in done:
        key = config_key(trial.params, sorted(trial.params))
        if key not in seen:
            seen.add(key)
            best.append(trial)
    return best


def plan(trials: Sequence[FrozenTrial], spec: Spec) -> list[Planned]:
    """Every confirmation trial the spec asks for, given the searched trials so far."""
    top = ranked_searched(trials, spec)[: spec.confirm.configurations]
    return [Planned(t.number, k) for t in top for k in range(1, spec.confirm.seeds + 1)]


def missing(trials: Sequence[FrozenTrial], spec: Spec) -> list[Planned]:
    """Planned confirmation trials that no trial stands for yet: what to queue.

    A failed one no longer stands for its round (as a failed searched trial is replaced);
    a retry or continuation of it, waiting or running, does.
    """
    return _without(trials, spec, (TrialState.FAIL,))


def unfinished(trials: Sequence[FrozenTrial], spec: Spec) -> list[Planned]:
    """Planned confirmation trials not finished yet: while there are, workers stay (a
    running one may belong to a dead worker, whose retry comes later)."""
    return _without(trials, spec, (TrialState.FAIL, TrialState.RUNNING, TrialState.WAITING))


def _without(
    trials: Sequence[FrozenTrial], spec: Spec, uncovering: tuple[TrialState, ...]
) -> list[Planned]:
    covered = set()
    for trial in trials:
        info = TrialInfo.of(trial)
        if info.confirms is None or info.confirm_round is None or trial.state in uncovering:
            continue
        covered.add(Planned(info.confirms, info.confirm_round))
    return [item for item in plan(trials, spec) if item not in covered]


def queue_missing(study: optuna.Study, spec: Spec, trials: Sequence[FrozenTrial]) -> int:
    """Queue every ``missing`` confirmation trial; the number queued.

    The caller holds the study's lease (``sweeper.sweep.lease``) and read ``trials`` after
    taking it: two processes that queue at once would queue each round twice.
    """
    by_number = {t.number: t for t in trials}
    due = missing(trials, spec)
    for item in due:
        params = by_number[item.searched].params
        study.enqueue_trial(params, user_attrs=confirmation_user_attrs(item.searched, item.round))
    return len(due)
