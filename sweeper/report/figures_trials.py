"""Figures about trials: learning curves, cost against quality, and the workers' timeline."""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import datetime

import numpy as np
import plotly.graph_objects as go

from sweeper.report.collect import StudyTables, TrialRow
from sweeper.report.escape import label
from sweeper.report.ranking import leaders, pareto_front, state_label
from sweeper.report.theme import (
    AMBER,
    BASELINE_LINE,
    MUTED,
    RANKS,
    RED,
    STATE_COLOURS,
    Drawn,
    Missing,
    axis,
    hover,
    layout,
    numbers,
)
from sweeper.store import trial_words as words

LEADERS = 5
STOPPED_SHOWN = 40


def stopped_sample(tables: StudyTables) -> tuple[list[TrialRow], int]:
    """Up to STOPPED_SHOWN stopped-early trials spread evenly over the study, and how many exist."""
    stopped = [t for t in tables.trials if t.word == words.STOPPED and t.curve]
    if len(stopped) <= STOPPED_SHOWN:
        return stopped, len(stopped)
    step = len(stopped) / STOPPED_SHOWN
    return [stopped[int(i * step)] for i in range(STOPPED_SHOWN)], len(stopped)


def _joined(trials: Sequence[TrialRow]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Many curves as one trace: points separated by gaps, which keeps the page small."""
    xs: list[float] = []
    ys: list[float] = []
    owners: list[float] = []
    for trial in trials:
        for step, value in trial.curve:
            xs.append(step)
            ys.append(value)
            owners.append(trial.number)
        xs.append(math.nan)
        ys.append(math.nan)
        owners.append(math.nan)
    return numbers(xs), numbers(ys), numbers(owners)


def curves_figure(tables: StudyTables) -> Drawn:
    """Per-epoch objective of the leaders, of a sample of stopped trials and of diverged ones,
    with the task's baseline as a line where it is on the objective's scale."""
    top = [t for t in leaders(tables, LEADERS) if t.curve]
    stopped, _ = stopped_sample(tables)
    diverged = [t for t in tables.trials if t.diverged and t.curve][:STOPPED_SHOWN]
    if not (top or stopped or diverged):
        return Missing("No trial reported a value per epoch yet.")
    traces = []
    for group, colour, name in ((stopped, MUTED, words.STOPPED), (diverged, RED, words.DIVERGED)):
        if group:
            traces.append(_lines(_joined(group), name, colour, 1.0, 0.55))
    for rank, trial in enumerate(top):
        name = f"#{rank + 1}: trial {trial.number}"
        traces.append(_lines(_joined([trial]), name, RANKS[rank % len(RANKS)], 2.4, 1.0))
    values = [v for t in (*top, *stopped, *diverged) for _, v in t.curve]
    base = tables.summary.baseline
    epochs = [s for t in (*top, *stopped, *diverged) for s, _ in t.curve]
    if base is not None and base.measure == tables.summary.objective and epochs:
        traces.append(
            go.Scatter(
                x=[min(epochs), max(epochs)],
                y=[base.value, base.value],
                mode="lines",
                name=label(f"baseline {base.value:.4g}"),
                line=BASELINE_LINE,
                hoverinfo="skip",
            )
        )
        values.append(base.value)
    objective = label(tables.summary.objective or "value")
    return go.Figure(
        traces,
        layout(
            height=420,
            xaxis=axis("epoch"),
            yaxis=axis(objective, log=_positive_wide(values), values=values),
        ),
    )


def _lines(
    curves: tuple[np.ndarray, np.ndarray, np.ndarray],
    name: str,
    colour: str,
    width: float,
    opacity: float,
) -> go.Scatter:
    xs, ys, owners = curves
    return go.Scatter(
        x=xs,
        y=ys,
        customdata=owners,
        mode="lines",
        name=label(name),
        line={"color": colour, "width": width},
        opacity=opacity,
        connectgaps=False,
        **hover("trial #%{customdata}, epoch %{x}: %{y:.4g}"),
    )


def _positive_wide(values: Sequence[float]) -> bool:
    finite = [v for v in values if math.isfinite(v)]
    return bool(finite) and min(finite) > 0 and max(finite) / min(finite) > 100


def cost_figure(tables: StudyTables) -> Drawn:
    """Compute seconds against value for completed trials, with the Pareto front drawn through."""
    done = [t for t in tables.completed() if math.isfinite(t.seconds)]
    if not done:
        return Missing("No completed trial with a recorded compute time yet.")
    front = pareto_front(done, tables.summary.direction)
    template = "trial #%{customdata}: %{x:.1f} s<br>value %{y:.4g}"
    dots = go.Scatter(
        x=numbers(t.seconds for t in done),
        y=numbers(t.value for t in done),
        customdata=np.array([t.number for t in done], dtype=np.int32),
        mode="markers",
        name="finished trials",
        marker={"color": STATE_COLOURS[words.FINISHED], "size": 6, "opacity": 0.6},
        **hover(template),
    )
    edge = go.Scatter(
        x=numbers(t.seconds for t in front),
        y=numbers(t.value for t in front),
        customdata=np.array([t.number for t in front], dtype=np.int32),
        mode="lines+markers",
        name="no cheaper trial is better",
        line={"color": AMBER, "width": 2, "shape": "hv"},
        marker={"color": AMBER, "size": 9, "symbol": "diamond"},
        **hover(template),
    )
    objective = label(tables.summary.objective or "value")
    seconds, values = [t.seconds for t in done], [t.value for t in done]
    x_axis = axis("compute seconds", log=_positive_wide(seconds), values=seconds)
    y_axis = axis(objective, log=_positive_wide(values), values=values)
    return go.Figure([dots, edge], layout(height=400, xaxis=x_axis, yaxis=y_axis))


def timeline_figure(tables: StudyTables) -> Drawn:
    """One lane per worker; each trial a bar from its start to its end, coloured by state."""
    timed = [t for t in tables.trials if t.start is not None]
    if not timed:
        return Missing("No trial has started yet.")
    latest = max(_ms(t.end or t.start) for t in timed)
    lanes = sorted({t.worker or "unknown worker" for t in timed})
    lane_of = {name: i for i, name in enumerate(lanes)}
    groups: dict[str, list[TrialRow]] = {}
    for trial in timed:
        groups.setdefault(state_label(trial), []).append(trial)
    traces = [t for key, rows in groups.items() for t in _lane_traces(key, rows, latest, lane_of)]
    lane_axis = axis(
        "worker",
        tickvals=list(range(len(lanes))),
        ticktext=[label(name) for name in lanes],
        range=[-0.7, len(lanes) - 0.3],
        zeroline=False,
    )
    height = 150 + 36 * len(lanes)
    return go.Figure(
        traces, layout(height=height, xaxis=axis("time", type="date"), yaxis=lane_axis)
    )


_EPOCH = datetime(1970, 1, 1)


def _ms(moment: datetime | None) -> float:
    # A date axis reads numbers as milliseconds; stored times are naive, so no zone shifts.
    if moment is None:
        return math.nan
    return (moment.replace(tzinfo=None) - _EPOCH).total_seconds() * 1000.0


def _lane_traces(
    key: str, rows: Sequence[TrialRow], latest: float, lane_of: dict[str, int]
) -> tuple[go.Scatter, go.Scatter]:
    starts = numbers(_ms(t.start) for t in rows)
    ends = numbers(_ms(t.end) if t.end else latest for t in rows)  # running: up to now
    lanes = numbers(lane_of[t.worker or "unknown worker"] for t in rows)
    gaps = np.full(len(rows), np.nan)
    colour = STATE_COLOURS.get(key, MUTED)
    name = label(state_label(rows[0]))
    bars = go.Scatter(
        x=np.column_stack([starts, ends, gaps]).ravel(),
        y=np.column_stack([lanes, lanes, gaps]).ravel(),
        mode="lines",
        name=name,
        line={"color": colour, "width": 12},
        hoverinfo="skip",
    )
    hover_points = go.Scatter(
        x=(starts + ends) / 2,
        y=lanes,
        customdata=np.array([[t.number, t.value] for t in rows], dtype=np.float64),
        mode="markers",
        name=name,
        marker={"color": colour, "size": 6, "opacity": 0},
        showlegend=False,
        **hover(f"trial #%{{customdata[0]}}: {name}<br>value %{{customdata[1]:.4g}}"),
    )
    return bars, hover_points
