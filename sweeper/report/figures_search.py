"""How the search went: best so far against compute spent, and coverage of the space."""

from __future__ import annotations

import math
from datetime import datetime

import numpy as np
import plotly.graph_objects as go

from sweeper.report.collect import StudyTables, TrialRow
from sweeper.report.coverage import range_position
from sweeper.report.escape import label
from sweeper.report.ranking import sort_key
from sweeper.report.theme import (
    AMBER,
    BASELINE_LINE,
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


def _in_order(tables: StudyTables) -> list[TrialRow]:
    """Trials as they ended (start time for the unfinished), then by number."""
    return sorted(tables.trials, key=lambda t: (t.end or t.start or datetime.max, t.number))


def progress_figure(tables: StudyTables) -> Drawn:
    """Each finished trial's value at the compute spent when it ended, and the best so far."""
    direction = tables.summary.direction
    spent = 0.0
    xs, ys, best_x, best_y, owners = [], [], [], [], []
    best = math.nan
    for trial in _in_order(tables):
        if math.isfinite(trial.seconds):
            spent += trial.seconds
        if trial.word not in (words.FINISHED, words.CONFIRMATION) or not math.isfinite(trial.value):
            continue
        xs.append(spent / 3600)
        ys.append(trial.value)
        owners.append(trial.number)
        if not math.isfinite(best) or sort_key(direction, trial.value) < sort_key(direction, best):
            best = trial.value
        best_x.append(spent / 3600)
        best_y.append(best)
    if not xs:
        return Missing("No trial has finished with a value yet.")
    dots = go.Scatter(
        x=numbers(xs),
        y=numbers(ys),
        customdata=np.array(owners, dtype=np.int32),
        mode="markers",
        name=words.FINISHED,
        marker={**outcome_marker(words.FINISHED, 6), "opacity": 0.55},
        **hover("trial #%{customdata}: %{y:.4g}<br>after %{x:.3g} compute hours"),
    )
    line = go.Scatter(
        x=numbers(best_x),
        y=numbers(best_y),
        mode="lines",
        name="best so far",
        line={"color": AMBER, "width": 2.5, "shape": "hv"},
        hoverinfo="skip",
    )
    traces = [dots, line]
    base = tables.summary.baseline
    if base is not None and base.measure == tables.summary.objective:
        traces.append(
            go.Scatter(
                x=[0.0, max(xs)],
                y=[base.value, base.value],
                mode="lines",
                name=label(f"baseline {base.value:.4g}"),
                line=BASELINE_LINE,
                hoverinfo="skip",
            )
        )
    objective = label(tables.summary.objective or "value")
    return go.Figure(
        traces, layout(height=380, xaxis=axis("compute hours spent"), yaxis=axis(objective))
    )


def coverage_figure(tables: StudyTables) -> Drawn:
    """One row per searched parameter: a tick at each trial's value within its range."""
    names = [p.name for p in tables.params if p.varies]
    if not names:
        return Missing("No searched parameter took more than one value.")
    xs: list[float] = []
    ys: list[str] = []
    owners: list[int] = []
    for trial in tables.trials:
        for name in names:
            if name in trial.params and name in trial.distributions:
                xs.append(range_position(trial.distributions[name], trial.params[name]))
                ys.append(label(name))
                owners.append(trial.number)
    ticks = go.Scatter(
        x=numbers(xs),
        y=ys,
        customdata=np.array(owners, dtype=np.int32),
        mode="markers",
        marker={"symbol": "line-ns", "size": 16, "line": {"color": INK, "width": 1.5}},
        opacity=0.35,
        showlegend=False,
        **hover("trial #%{customdata}"),
    )
    position = axis(
        "place in the searched range",
        tickvals=[0, 0.5, 1],
        ticktext=["low end", "middle", "high end"],
        range=[-0.04, 1.04],
    )
    rows = axis(
        "parameter", type="category", categoryorder="array", categoryarray=[label(n) for n in names]
    )
    return go.Figure([ticks], layout(height=90 + 44 * len(names), xaxis=position, yaxis=rows))
