"""Gradient health per trial, and plain-language advice derived from the numbers."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from sweeper.report.collect import StudyTables, TrialRow
from sweeper.report.ranking import leaders

MOSTLY_CLIPPED = 0.5  # share of steps clipped above which clipping sets the step size
EXPLODING_GROWTH = 1e3  # growth of the median norm across epochs: three orders of magnitude
VANISHING_NORM = 1e-5  # a median pre-clip norm this small barely moves the weights
FLAT_LOSS = 0.01  # relative change of the training loss below which it counts as flat
LEADERS = 5


@dataclass(frozen=True)
class TrialGradients:
    """One trial's pre-clip gradient norms summarised over its epochs (NaN when unknown)."""

    number: int
    state: str  # our word (store.trial_words)
    diverged: bool
    value: float
    clip: float
    lr: float
    peak_p95: float
    clip_rate: float
    growth: float  # last finite median norm / first finite median norm
    typical_norm: float  # median over epochs of the per-epoch median norm
    loss_change: float  # |last - first| / |first| of the training loss
    nonfinite_steps: int


@dataclass(frozen=True)
class Advice:
    level: str  # "warn", "info" or "ok"
    text: str


def gradient_table(tables: StudyTables) -> list[TrialGradients]:
    """A row for every trial that recorded telemetry."""
    rows = []
    for trial in tables.trials:
        series = tables.series.get(trial.number)
        if series is not None and series["epoch"].size:
            rows.append(_summarise(trial, series))
    return rows


def _summarise(trial: TrialRow, s: dict[str, np.ndarray]) -> TrialGradients:
    medians = _finite(s["grad_norm_median"])
    losses = _finite(s["train_loss"])
    steps = np.nan_to_num(s["steps"], nan=0.0)
    clip = np.nan_to_num(s["clip_fraction"], nan=0.0)
    growth = medians[-1] / medians[0] if medians.size > 1 and medians[0] > 0 else math.nan
    change = (
        abs(losses[-1] - losses[0]) / abs(losses[0]) if losses.size > 1 and losses[0] else math.nan
    )
    return TrialGradients(
        number=trial.number,
        state=trial.word,
        diverged=trial.diverged,
        value=trial.value,
        clip=trial.clip,
        lr=trial.lr,
        peak_p95=_max(s["grad_norm_p95"]),
        clip_rate=float(np.average(clip, weights=steps)) if steps.sum() > 0 else float(clip.mean()),
        growth=float(growth),
        typical_norm=float(np.median(medians)) if medians.size else math.nan,
        loss_change=float(change),
        nonfinite_steps=int(np.nan_to_num(s["nonfinite_steps"], nan=0.0).sum()),
    )


def _finite(values: np.ndarray) -> np.ndarray:
    return values[np.isfinite(values)]


def _max(values: np.ndarray) -> float:
    finite = _finite(values)
    return float(finite.max()) if finite.size else math.nan


def exploding(rows: Sequence[TrialGradients]) -> list[TrialGradients]:
    return [r for r in rows if math.isfinite(r.growth) and r.growth >= EXPLODING_GROWTH]


def vanishing(rows: Sequence[TrialGradients]) -> list[TrialGradients]:
    return [r for r in rows if r.typical_norm <= VANISHING_NORM and r.loss_change < FLAT_LOSS]


def advice(tables: StudyTables, rows: Sequence[TrialGradients]) -> list[Advice]:
    """What the norms say, most pressing first; one reassuring line when nothing is wrong."""
    if not rows:
        return [Advice("info", "No gradient telemetry was recorded for this study.")]
    found = [
        *_clipping_advice(tables, rows),
        *_exploding_advice(rows),
        *_vanishing_advice(rows),
        *_divergence_advice(tables),
        *_idle_clip_advice(rows),
    ]
    if not any(a.level == "warn" for a in found):
        found.insert(0, Advice("ok", "No warning signs in the gradient norms."))
    return found


def _clipping_advice(tables: StudyTables, rows: Sequence[TrialGradients]) -> list[Advice]:
    by_number = {r.number: r for r in rows}
    top = [by_number[t.number] for t in leaders(tables, LEADERS) if t.number in by_number]
    clipped = [r.clip_rate for r in top if r.clip > 0]
    if not clipped or float(np.median(clipped)) <= MOSTLY_CLIPPED:
        return []
    share = float(np.median(clipped))
    return [
        Advice(
            "warn",
            f"The best {len(top)} trials clip on most steps (median {share:.0%} of steps): "
            "the threshold, not the learning rate, sets their step size. "
            "Raise clip or lower lr.",
        )
    ]


def _exploding_advice(rows: Sequence[TrialGradients]) -> list[Advice]:
    found = sorted(exploding(rows), key=lambda r: -r.growth)
    if not found:
        return []
    names = ", ".join(f"#{r.number}" for r in found[:5])
    return [
        Advice(
            "warn",
            f"Exploding gradients: in {len(found)} trial(s) the median pre-clip norm grew by "
            f"a factor of {EXPLODING_GROWTH:.0f} or more across epochs (up to "
            f"{found[0].growth:,.0f}×; {names}). Lower lr, turn clipping on or tighten it, "
            "or shorten unroll.",
        )
    ]


def _vanishing_advice(rows: Sequence[TrialGradients]) -> list[Advice]:
    found = vanishing(rows)
    if not found:
        return []
    names = ", ".join(f"#{r.number}" for r in found[:5])
    smallest = min(r.typical_norm for r in found)
    return [
        Advice(
            "warn",
            f"Vanishing gradients: {len(found)} trial(s) kept a median pre-clip norm of "
            f"{VANISHING_NORM:g} or less (as low as {smallest:.2g}) while the training loss "
            f"stayed flat ({names}). Try a gated cell (GRU or LSTM), a shorter unroll or a "
            "larger lr.",
        )
    ]


def _divergence_advice(tables: StudyTables) -> list[Advice]:
    finished = [t for t in tables.trials if t.state in ("COMPLETE", "PRUNED")]
    diverged = [t for t in finished if t.diverged]
    if not diverged:
        return []
    text = (
        f"{len(diverged)} of the {len(finished)} trials that ran to an end diverged "
        "(non-finite loss)."
    )
    lr_div = [t.lr for t in diverged if math.isfinite(t.lr)]
    lr_rest = [t.lr for t in finished if not t.diverged and math.isfinite(t.lr)]
    if lr_div and lr_rest and np.median(lr_div) > np.percentile(lr_rest, 75):
        text += (
            f" Their median lr is {np.median(lr_div):.3g} against {np.median(lr_rest):.3g} "
            "for the others: lower the top of the lr range."
        )
    unclipped = sum(1 for t in diverged if t.clip == 0)
    if unclipped * 2 > len(diverged):
        text += f" {unclipped} of them ran with clipping off: turn clipping on."
    return [Advice("warn", text)]


def _idle_clip_advice(rows: Sequence[TrialGradients]) -> list[Advice]:
    clipped = [r for r in rows if r.clip > 0 and math.isfinite(r.peak_p95)]
    if not clipped or any(r.clip_rate > 0 for r in clipped):
        return []
    return [
        Advice(
            "info",
            "Clipping never engaged: no trial's pre-clip norm reached its threshold, so the "
            "clip values searched had no effect.",
        )
    ]
