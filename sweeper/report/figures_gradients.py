"""Figures about gradient health: pre-clip norms against thresholds, clip rates, norm curves."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import plotly.graph_objects as go

from sweeper.report.collect import StudyTables
from sweeper.report.escape import label
from sweeper.report.gradient_findings import TrialGradients, exploding, vanishing
from sweeper.report.ranking import leaders
from sweeper.report.theme import (
    INK,
    MUTED,
    RANKS,
    RED,
    Drawn,
    Missing,
    axis,
    clipping_off_at,
    hover,
    layout,
    numbers,
    outcome_marker,
)
from sweeper.store import trial_words as words

JITTER = 0.04  # decades; spreads trials that share a clip value
CURVES_PER_GROUP = 5


def _groups(rows: Sequence[TrialGradients]) -> list[tuple[str, str, list[TrialGradients]]]:
    found = [(word, word, [r for r in rows if r.state == word]) for word in words.WORDS]
    return [(key, name, group) for key, name, group in found if group]


def _points(
    name: str, key: str, xs: np.ndarray, ys: np.ndarray, data: np.ndarray, template: str
) -> go.Scatter:
    return go.Scatter(
        x=xs,
        y=ys,
        customdata=data,
        mode="markers",
        name=name,
        marker={**outcome_marker(key), "opacity": 0.75},
        **hover(template),
    )


def norm_clip_figure(rows: Sequence[TrialGradients]) -> Drawn:
    """Peak p95 pre-clip norm of each trial against its threshold; above the diagonal it clips."""
    usable = [r for r in rows if r.peak_p95 > 0 and math.isfinite(r.clip)]
    if not usable:
        return Missing("No trial recorded a finite pre-clip gradient norm.")
    thresholds = [r.clip for r in usable if r.clip > 0]
    off_x = clipping_off_at(thresholds)
    rng = np.random.default_rng(0)
    template = (
        "trial #%{customdata[0]}: clip %{customdata[1]}<br>"
        "p95 norm %{y:.3g}<br>clipped %{customdata[2]:.0%}"
    )
    traces = []
    for key, name, group in _groups(usable):
        clip = numbers(r.clip for r in group)
        xs = np.where(clip > 0, clip, off_x) * 10 ** rng.uniform(-JITTER, JITTER, len(group))
        data = np.array([[r.number, r.clip, r.clip_rate] for r in group], dtype=np.float64)
        traces.append(_points(name, key, xs, numbers(r.peak_p95 for r in group), data, template))
    fig = go.Figure(
        traces,
        layout(
            height=420,
            xaxis=axis("clip threshold", log=True, values=[*thresholds, off_x]),
            yaxis=axis("peak p95 pre-clip norm", log=True, values=[r.peak_p95 for r in usable]),
        ),
    )
    if thresholds:
        fig.add_trace(_diagonal(min(thresholds) / 2, max(thresholds) * 2))
    if len(thresholds) < len(usable):
        fig.add_annotation(
            x=math.log10(off_x),
            y=1.04,
            yref="paper",
            text="clipping off",
            showarrow=False,
            font={"color": MUTED},
        )
    return fig


def _diagonal(low: float, high: float) -> go.Scatter:
    """Where the pre-clip norm equals the threshold."""
    return go.Scatter(
        x=[low, high],
        y=[low, high],
        mode="lines",
        name="norm = threshold",
        line={"color": INK, "dash": "dot", "width": 1},
        hoverinfo="skip",
    )


def _picks(tables: StudyTables, rows: Sequence[TrialGradients]) -> dict[int, str]:
    """The trials whose norm curves are drawn, each with why."""
    picks: dict[int, str] = {}
    for trial in leaders(tables, CURVES_PER_GROUP):
        picks.setdefault(trial.number, "leader")
    troubled = (
        (exploding(rows), "exploding"),
        (vanishing(rows), "vanishing"),
        ([r for r in rows if r.diverged], "diverged"),
    )
    for group, why in troubled:
        for row in group[:CURVES_PER_GROUP]:
            picks.setdefault(row.number, why)
    return picks


def _curve_colour(why: str, index: int) -> str:
    # leaders come first in the picks, so their index is their rank
    if why == "leader":
        return RANKS[index % len(RANKS)]
    return RED if why == "diverged" else INK


def norm_curves_figure(tables: StudyTables, rows: Sequence[TrialGradients]) -> Drawn:
    """Median pre-clip norm per epoch for the leaders and for trials that showed trouble."""
    traces = []
    for index, (number, why) in enumerate(_picks(tables, rows).items()):
        series = tables.series.get(number)
        if series is None:
            continue
        norms = series["grad_norm_median"]
        dash = "solid" if why == "leader" else "dash"
        traces.append(
            go.Scatter(
                x=series["epoch"],
                y=np.where(np.isfinite(norms) & (norms > 0), norms, np.nan),
                mode="lines+markers",
                name=label(f"trial {number} ({why})"),
                line={"color": _curve_colour(why, index), "width": 2, "dash": dash},
                marker={"size": 4},
            )
        )
    if not traces:
        return Missing("No per-epoch gradient norms to draw.")
    shown = [v for trace in traces for v in trace.y]
    norm_axis = axis("median pre-clip norm", log=True, values=shown)
    return go.Figure(traces, layout(height=400, xaxis=axis("epoch"), yaxis=norm_axis))
