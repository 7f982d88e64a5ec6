"""The configuration a study chooses: the best by mean over its seeds, and how sure that is.

A searched trial gives one seed's score of its configuration; its confirmation trials
(``sweeper.sweep.confirmation``) give more. The choice is the configuration with the best
mean over its seeds (the searched trial counting as one); with its spread, and the
runners-up it cannot be told apart from. `sweeper best`, `sweeper status` and the summary
read this one choice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import optuna
from optuna.trial import FrozenTrial, TrialState

from sweeper.errors import InputError
from sweeper.spec.sections import Spec
from sweeper.store.attrs import StudyInfo, TrialInfo, record_choice
from sweeper.sweep.confirmation import missing, ranked_searched

SEPARATION = 2.0  # standard errors of the difference a ranking needs


@dataclass(frozen=True)
class Candidate:
    """A confirmed configuration: its searched trial and every seed's score of it."""

    trial: int  # the searched trial whose parameters these are
    params: dict[str, Any]
    values: tuple[float, ...]  # the searched trial's value first, then its confirmation trials'

    @property
    def seeds(self) -> int:
        return len(self.values)

    @property
    def mean(self) -> float:
        return sum(self.values) / len(self.values)

    @property
    def std(self) -> float:
        """Sample standard deviation over the seeds (n - 1 in the denominator); NaN for one."""
        n = len(self.values)
        if n < 2 or not all(math.isfinite(v) for v in self.values):
            return math.nan
        mean = self.mean
        return math.sqrt(sum((v - mean) ** 2 for v in self.values) / (n - 1))

    @property
    def stderr(self) -> float:
        """Standard error of the mean: std / sqrt(n)."""
        return self.std / math.sqrt(len(self.values))


def cannot_tell_apart(a: Candidate, b: Candidate) -> bool:
    """Whether two configurations' mean scores are too close to rank.

    With means m_a, m_b and sample standard deviations s_a, s_b over n_a, n_b seeds, the
    standard error of their difference is (Welch's, for unequal variances)

        se = sqrt(s_a² / n_a + s_b² / n_b)

    and they cannot be told apart when |m_a - m_b| < 2 · se (about a 95% normal interval of
    the difference, common practice). A configuration that diverged on some seed has an
    infinite mean: it is told apart from every finite one.
    """
    if not (math.isfinite(a.mean) and math.isfinite(b.mean)):
        return a.mean == b.mean
    se = math.sqrt(a.stderr**2 + b.stderr**2)
    if math.isnan(se):  # one seed somewhere: no spread to go on
        return True
    return abs(a.mean - b.mean) < SEPARATION * se


@dataclass(frozen=True)
class Choice:
    """The chosen configuration. ``confirmed``: confirmation trials stand behind it (else it
    is the best searched trial, one seed). ``tied_with``: the searched trials of the
    runners-up it cannot be told apart from (``cannot_tell_apart``)."""

    trial: int
    params: dict[str, Any]
    mean: float
    std: float
    stderr: float
    seeds: int
    confirmed: bool
    tied_with: tuple[int, ...]
    candidates: tuple[Candidate, ...]  # best mean first; empty when unconfirmed
    pending: int  # confirmation trials the spec asks for that have not finished
    objective: str

    @property
    def told_apart(self) -> bool:
        return self.confirmed and not self.tied_with

    def lines(self) -> list[str]:
        """The choice in words, for the terminal."""
        if not self.confirmed:
            why = (
                f"{self.pending} confirmation trials to run" if self.pending else "no confirmation"
            )
            return [
                f"chosen: trial {self.trial}, {self.objective} {self.mean:.5g} from one seed "
                f"({why})"
            ]
        head = (
            f"chosen: trial {self.trial}'s configuration, {self.objective} mean {self.mean:.5g} "
            f"over {self.seeds} seeds (std {self.std:.3g}, standard error {self.stderr:.3g})"
        )
        lines = [head]
        if self.tied_with:
            others = ", ".join(str(n) for n in self.tied_with)
            trials = "trial" if len(self.tied_with) == 1 else "trials"
            lines.append(
                f"cannot be told apart from {trials} {others}: the gap is under "
                f"{SEPARATION:g} standard errors of the difference; any of them is as good"
            )
        elif len(self.candidates) > 1:
            lines.append(
                f"told apart from the other {len(self.candidates) - 1} confirmed "
                f"configurations (gap of at least {SEPARATION:g} standard errors)"
            )
        if self.pending:
            lines.append(f"{self.pending} confirmation trials still to run")
        for c in self.candidates:
            values = ", ".join(f"{v:.4g}" for v in c.values)
            lines.append(f"  trial {c.trial}: mean {c.mean:.5g} over {c.seeds} seeds ({values})")
        return lines

    def as_stored(self) -> dict[str, Any]:
        def number(value: float) -> float | None:  # JSON has no NaN
            return value if math.isfinite(value) else None

        return {
            "trial": self.trial,
            "mean": number(self.mean),
            "std": number(self.std),
            "stderr": number(self.stderr),
            "seeds": self.seeds,
            "confirmed": self.confirmed,
            "tied_with": list(self.tied_with),
        }


def _confirmation_values(trials: list[FrozenTrial], worst: float) -> dict[int, list[float]]:
    """Finished confirmation trials' values by the searched trial they repeat (a diverged
    one scores the worst value: the configuration failed on that seed)."""
    values: dict[int, list[float]] = {}
    for trial in sorted(trials, key=lambda t: t.number):
        info = TrialInfo.of(trial)
        if info.confirms is None:
            continue
        if trial.state == TrialState.COMPLETE and trial.value is not None:
            values.setdefault(info.confirms, []).append(float(trial.value))
        elif trial.state == TrialState.PRUNED and info.diverged:
            values.setdefault(info.confirms, []).append(worst)
    return values


def confirmed_choice(study: optuna.Study, spec: Spec) -> Choice:
    """The study's choice; InputError when it has no completed searched trial yet."""
    trials = study.get_trials(deepcopy=False)
    ranked = ranked_searched(trials, spec)
    if not ranked:
        raise InputError(
            f"study '{study.study_name}' has no completed trial yet; run or resume it first"
        )
    sign = 1.0 if spec.study.better == "lower" else -1.0
    extra = _confirmation_values(trials, sign * math.inf)
    pending = len(missing(trials, spec)) + sum(
        1
        for t in trials
        if TrialInfo.of(t).is_confirmation and t.state in (TrialState.RUNNING, TrialState.WAITING)
    )
    objective = StudyInfo.of(study).objective
    candidates = [
        Candidate(t.number, dict(t.params), (float(t.value or 0.0), *extra[t.number]))
        for t in ranked
        if t.number in extra
    ]
    if not candidates:
        best = ranked[0]
        value = float(best.value or 0.0)
        return Choice(
            best.number, dict(best.params), value, math.nan, math.nan, 1, False, (), (),
            pending, objective,
        )  # fmt: skip
    candidates.sort(key=lambda c: (sign * c.mean, c.trial))
    top = candidates[0]
    tied = tuple(c.trial for c in candidates[1:] if cannot_tell_apart(top, c))
    return Choice(
        top.trial, top.params, top.mean, top.std, top.stderr, top.seeds, True, tied,
        tuple(candidates), pending, objective,
    )  # fmt: skip


def chosen_trial(study: optuna.Study, spec: Spec) -> FrozenTrial:
    """The searched trial whose configuration the study chooses."""
    number = confirmed_choice(study, spec).trial
    return next(t for t in study.get_trials(deepcopy=False) if t.number == number)


def settle_choice(study: optuna.Study, spec: Spec) -> list[str]:
    """Store the choice in the study (once a sweep ends) and return it in words."""
    try:
        choice = confirmed_choice(study, spec)
    except InputError:
        return []
    record_choice(study, choice.as_stored())
    return choice.lines()
