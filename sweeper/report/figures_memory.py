"""Score and cost against the unroll length, with the task's dependency length marked."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from sweeper.report.collect import StudyTables, TrialRow
from sweeper.report.escape import label
from sweeper.report.ranking import best
from sweeper.report.task_facts import Dependency
from sweeper.report.theme import (
    AMBER,
    INK,
    Drawn,
    Missing,
    axis,
    hover,
    layout,
    numbers,
    outcome_marker,
)
from sweeper.store import trial_words as words

COSTED = (words.FINISHED, words.CONFIRMATION, words.STOPPED, words.DIVERGED)


def _with_unroll(rows: Sequence[TrialRow]) -> list[TrialRow]:
    return [t for t in rows if math.isfinite(t.unroll) and t.unroll > 0]


def _wide(values: Sequence[float]) -> bool:
    finite = [v for v in values if math.isfinite(v)]
    return bool(finite) and min(finite) > 0 and max(finite) / min(finite) > 100


def memory_figure(tables: StudyTables, dependency: Dependency | None) -> Drawn:
    """Top: each finished trial's value against its unroll. Bottom: compute seconds per trial."""
    done = _with_unroll(tables.completed())
    costed = [t for t in _with_unroll(tables.trials) if t.word in COSTED]
    costed = [t for t in costed if math.isfinite(t.seconds)]
    if len({t.unroll for t in done}) < 2:
        return Missing("The unroll length took fewer than two values among finished trials.")
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08)
    leader = best(tables)
    objective = label(tables.summary.objective or "value")
    others = [t for t in done if leader is None or t.number != leader.number]
    _dots(fig, others, lambda t: t.value, words.FINISHED, 1, "value %{y:.4g}")
    if leader is not None and leader in done:
        chosen = {"color": AMBER, "symbol": "star", "size": 13, "line": {"color": INK, "width": 1}}
        _dots(fig, [leader], lambda t: t.value, "best", 1, "value %{y:.4g}", chosen)
    for word in COSTED:
        group = [t for t in costed if t.word == word]
        _dots(fig, group, lambda t: t.seconds, word, 2, "%{y:.1f} compute s", show=False)
    if dependency is not None:
        fig.add_vline(x=dependency.steps, line={"color": INK, "dash": "dash", "width": 1.5})
        fig.add_annotation(
            x=dependency.steps,
            y=1.0,
            yref="y domain",
            text=label(f" task {dependency.name} = {dependency.steps}"),
            showarrow=False,
            xanchor="left",
            yanchor="top",
            font={"color": INK},
        )
    fig.update_layout(layout(height=520, showlegend=True))
    fig.update_xaxes(axis("unroll (steps)"), row=2, col=1)
    fig.update_xaxes(axis("unroll (steps)", showticklabels=True), row=1, col=1)
    values, seconds = [t.value for t in done], [t.seconds for t in costed]
    fig.update_yaxes(axis(objective, log=_wide(values), values=values), row=1, col=1)
    fig.update_yaxes(axis("compute s", log=_wide(seconds), values=seconds), row=2, col=1)
    return fig


def _dots(
    fig: go.Figure,
    rows: Sequence[TrialRow],
    y_of: Callable[[TrialRow], float],
    name: str,
    row: int,
    template: str,
    marker: dict[str, object] | None = None,
    show: bool = True,
) -> None:
    if not rows:
        return
    fig.add_trace(
        go.Scatter(
            x=numbers(t.unroll for t in rows),
            y=numbers(y_of(t) for t in rows),
            customdata=np.array([t.number for t in rows], dtype=np.int32),
            mode="markers",
            name=label(name),
            legendgroup=label(name),
            showlegend=show,
            marker=marker or {**outcome_marker(name), "opacity": 0.75},
            **hover(f"trial #%{{customdata}}: unroll %{{x}}<br>{template}"),
        ),
        row=row,
        col=1,
    )
