"""Retrain one trial from its stored parameters and seed; compare each epoch with its record.

Trials are deterministic on one machine (same parameters, seed and thread count give the same
curve), so the replay must agree exactly: every deterministic value of every recorded epoch.
Seconds and sequences per second are not compared. The table stores non-finite values as
NULL, so a recorded NULL agrees with any non-finite replayed value.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import optuna

from sweeper.errors import InputError
from sweeper.results.stored_trial import (
    StoredTrial,
    find_trial,
    stored_trial,
    sweep_threads,
    torch_threads,
    training_setup,
)
from sweeper.spec.sections import Spec
from sweeper.store import epoch_rows
from sweeper.store.attrs import TrialInfo
from sweeper.store.connect import engine_of
from sweeper.training.epoch_loop import run_epochs
from sweeper.training.epoch_record import EpochRecord
from sweeper.training.trial_run import TrialRun

SHOWN = ("train_loss", "valid_loss", "valid_metric")
GRADIENTS = (
    "grad_norm_mean",
    "grad_norm_median",
    "grad_norm_p95",
    "grad_norm_max",
    "clip_fraction",
    "nonfinite_steps",
    "steps",
)
COMPARED = SHOWN + GRADIENTS


def same(recorded: Any, replayed: Any) -> bool:
    if recorded == replayed:
        return True
    both = (recorded, replayed)
    return all(isinstance(v, float) and not math.isfinite(v) for v in both)


@dataclass(frozen=True)
class EpochComparison:
    epoch: int
    recorded: dict[str, Any]
    replayed: dict[str, Any]

    @property
    def differing(self) -> tuple[str, ...]:
        return tuple(k for k in COMPARED if not same(self.recorded[k], self.replayed[k]))


@dataclass(frozen=True)
class ReplayPlan:
    """A trial ready to be trained again, with the epochs it recorded."""

    spec: Spec
    stored: StoredTrial
    recorded: tuple[dict[str, Any], ...]
    threads: int


def plan_replay(study: optuna.Study, spec: Spec, number: int) -> ReplayPlan:
    stored = stored_trial(study, spec, find_trial(study, number))
    rows = epoch_rows.read_epochs(engine_of(study), study.study_name)
    recorded = tuple(row for row in rows if row["trial_number"] == number)
    if not recorded:
        raise InputError(f"trial {number} of '{study.study_name}' recorded no epoch to compare")
    # the thread count the trial ran with (recorded since it changes the floating-point sums)
    threads = TrialInfo.of(stored.trial).threads or sweep_threads(spec)
    return ReplayPlan(spec, stored, recorded, threads)


def run_replay(
    plan: ReplayPlan, on_epoch: Callable[[EpochComparison], None] | None = None
) -> tuple[EpochComparison, ...]:
    """Train the trial for as many epochs as it recorded, with the sweep's thread count."""
    task, build = training_setup(plan.spec)
    comparisons: list[EpochComparison] = []

    def compare(record: EpochRecord) -> None:
        row, replayed = plan.recorded[record.epoch - 1], record.as_dict()
        comparison = EpochComparison(
            row["epoch"], {k: row[k] for k in COMPARED}, {k: replayed[k] for k in COMPARED}
        )
        comparisons.append(comparison)
        if on_epoch is not None:
            on_epoch(comparison)

    with torch_threads(plan.threads):
        run = TrialRun(task, plan.stored.params, plan.stored.seed, build, plan.stored.revision)
        # every recorded epoch is compared, even past a divergence the record does not have
        while run.epoch < len(plan.recorded):
            run_epochs(run, len(plan.recorded), on_epoch=[compare])
    return tuple(comparisons)


def header_lines(plan: ReplayPlan) -> list[str]:
    stored, plural = plan.stored, "" if plan.threads == 1 else "s"
    return [
        f"replay of trial {stored.number} in '{stored.study_name}': seed {stored.seed}, "
        f"{len(plan.recorded)} epochs, {plan.threads} torch thread{plural}, "
        f"trainer {stored.revision}",
        f"{'epoch':>5}  {'measure':<16} {'recorded':<24} replayed",
    ]


def epoch_lines(comparison: EpochComparison) -> list[str]:
    def line(first: str, name: str, recorded: Any, replayed: Any, ok: bool) -> str:
        verdict = "same" if ok else "DIFFERS"
        return f"{first:>5}  {name:<16} {_text(recorded):<24} {_text(replayed):<24} {verdict}"

    a, b = comparison.recorded, comparison.replayed
    lines = [line("", k, a[k], b[k], same(a[k], b[k])) for k in SHOWN]
    differing = [k for k in GRADIENTS if k in comparison.differing]
    if differing:
        lines += [line("", k, a[k], b[k], False) for k in differing]
    else:
        count = f"{len(GRADIENTS)} values"
        lines.append(line("", "gradient stats", count, count, True))
    lines[0] = str(comparison.epoch).rjust(5) + lines[0][5:]
    return lines


def verdict_line(comparisons: tuple[EpochComparison, ...]) -> str:
    bad = [c for c in comparisons if c.differing]
    if not bad:
        return (
            f"agree: the replay matches the record exactly ({len(comparisons)} epochs, "
            f"{len(COMPARED)} values each)"
        )
    first = bad[0]
    return (
        f"differ: {len(bad)} of {len(comparisons)} epochs disagree; the first is epoch "
        f"{first.epoch} ({', '.join(first.differing)})"
    )


def _text(value: Any) -> str:
    return repr(value) if isinstance(value, float) else str(value)
