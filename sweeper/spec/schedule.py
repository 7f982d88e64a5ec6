"""The stopping schedule a sweep uses: the spec's ``[stopping]`` keys, and for those it leaves
out, values chosen from the trial budget and the epochs.

The rule: enough trials must run every epoch for the ranking and the importance to mean
something: a third of the budget, and at least 8 (or the whole budget when it is smaller).
ASHA with reduction ``r`` and ``k`` decisions lets about ``budget / r**k`` trials reach the
last epoch (fewer by chance, so the plan asks for ``MARGIN`` times as many), so the schedule
takes the most decisions (reduction 3 first, then 2) that leave that many, placing the first
decision at ``ceil(epochs / r**k)`` so that exactly ``k`` decisions fall before the last
epoch. When even one decision would leave too few, no trial is stopped. With a third of the
budget wanted, that is one halving at mid-training from about 24 trials, and no stopping
below. ``benchmarks/score_choice.py`` counts the trials that actually finish under it.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from dataclasses import dataclass

from sweeper.spec.sections import Spec, StoppingSection, StudySection, budget_of

FINISH_SHARE = 3  # a third of the budget runs every epoch ...
FINISH_AT_LEAST = 8  # ... and at least this many trials (all of a smaller budget)
# ASHA's share of finishers falls short of 1 / reduction**k by chance and while the first
# trials compete with few others (benchmarks/score_choice.py measures it): plan for more
MARGIN = 1.3
REDUCTIONS = (3, 2)  # tried in this order when the spec names none
FIXED_REDUCTION = 3  # median and Hyperband, and an objective plugin's own steps
FIXED_FIRST = 1


@dataclass(frozen=True)
class Schedule:
    """What the stopping rule does; ``why`` says what was chosen and why ("" when the spec
    set every key that matters)."""

    rule: str
    min_epochs: int
    reduction: int
    why: str = ""


def spec_schedule(spec: Spec) -> Schedule:
    """The schedule of ``spec``, fitted to the budget its file names: a ``--trials`` top-up
    leaves the schedule of the study's earlier trials as it was."""
    trials = spec.study.trials
    if "trials" in spec.overrides:
        table = tomllib.loads(spec.text).get("study", {})
        trials = table.get("trials", StudySection.trials)
    in_file = dataclasses.replace(spec, study=dataclasses.replace(spec.study, trials=trials))
    plugin = spec.is_objective_plugin
    return choose_schedule(spec.stopping, budget_of(in_file), spec.training.epochs, plugin)


def finishers_needed(budget: int) -> int:
    return min(budget, max(FINISH_AT_LEAST, math.ceil(budget / FINISH_SHARE)))


def decisions(first: int, reduction: int, epochs: int) -> int:
    """ASHA's decision epochs ``first * reduction**i`` that fall before the last epoch."""
    count, at = 0, first
    while at < epochs:
        count, at = count + 1, at * reduction
    return count


def choose_schedule(
    stopping: StoppingSection, budget: int, epochs: int, plugin: bool = False
) -> Schedule:
    """The schedule for ``budget`` trials of ``epochs`` epochs; explicit keys always win."""
    rule = stopping.rule
    if rule in ("none", "median", "hyperband") or (plugin and rule in ("auto", "asha")):
        first = stopping.min_epochs or FIXED_FIRST
        reduction = stopping.reduction or FIXED_REDUCTION
        why = ""
        if rule == "auto":  # an objective plugin: its steps are its own, unknown here
            rule = "asha"
            why = "not fitted to the budget: an objective plugin counts its own steps"
        return Schedule(rule, first, reduction, why)
    return _fitted(stopping, budget, epochs)


def _fitted(stopping: StoppingSection, budget: int, epochs: int) -> Schedule:
    """ASHA fitted to the budget, or no stopping when the budget is too small for it."""
    need = finishers_needed(budget)
    reductions = (stopping.reduction,) if stopping.reduction else REDUCTIONS
    for reduction in reductions:
        first = stopping.min_epochs or _first_for(budget, need, reduction, epochs)
        cuts = decisions(first, reduction, epochs) if first else 0
        if cuts and budget / reduction**cuts >= MARGIN * need:
            return _asha(stopping, budget, epochs, first, reduction)
    if stopping.rule == "asha" or stopping.min_epochs or stopping.reduction:
        # ASHA asked for, though the budget is small: the fewest, latest decisions
        reduction = stopping.reduction or min(REDUCTIONS)
        first = stopping.min_epochs or max(1, math.ceil(epochs / reduction))
        return _asha(stopping, budget, epochs, first, reduction)
    why = (
        f"chosen: stopping any of {budget} trials of {epochs} epochs would leave fewer "
        f"than {need} to run every epoch"
    )
    return Schedule("none", FIXED_FIRST, FIXED_REDUCTION, why if epochs > 1 else "")


def _first_for(budget: int, need: int, reduction: int, epochs: int) -> int:
    """The first decision epoch of the most decisions that leave ``need`` finishers; 0 when
    not even one does."""
    for cuts in range(decisions(1, reduction, epochs), 0, -1):
        if budget / reduction**cuts >= MARGIN * need:
            return max(1, math.ceil(epochs / reduction**cuts))
    return 0


def _asha(
    stopping: StoppingSection, budget: int, epochs: int, first: int, reduction: int
) -> Schedule:
    finishing = budget // reduction ** decisions(first, reduction, epochs)
    return Schedule("asha", first, reduction, _why(stopping, budget, epochs, finishing))


def _why(stopping: StoppingSection, budget: int, epochs: int, finishing: int) -> str:
    chosen = [
        key
        for key, value in (
            ("rule", stopping.rule == "auto"),
            ("first decision", not stopping.min_epochs),
            ("reduction", not stopping.reduction),
        )
        if value
    ]
    if not chosen:
        return ""
    return (
        f"{', '.join(chosen)} chosen for {budget} trials of {epochs} epochs: about "
        f"{finishing} trials run every epoch (at least {finishers_needed(budget)} wanted)"
    )
