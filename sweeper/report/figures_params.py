"""Figures about parameters: importance, the response to each one, and the strongest pair."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from sweeper.report.collect import ParamInfo, StudyTables, TrialRow
from sweeper.report.escape import label, template_label
from sweeper.report.importance import ImportanceResult
from sweeper.report.ranking import best
from sweeper.report.theme import (
    AMBER,
    INK,
    TEAL,
    Drawn,
    Missing,
    axis,
    hover,
    layout,
    numbers,
    value_scale,
)

COLUMNS = 3
PAIR_BINS = 8
MIN_PAIR_TRIALS = 4


def importance_figure(result: ImportanceResult) -> Drawn:
    """Horizontal bars of each parameter's share, most important on top, with intervals."""
    if not result.rows:
        return Missing(f"Importance not estimated: {result.note}.")
    rows = list(result.rows)
    shares = np.array([r.share for r in rows])
    trace = go.Bar(
        x=shares,
        y=[label(r.name) for r in rows],
        orientation="h",
        marker={"color": TEAL},
        error_x={
            "type": "data",
            "symmetric": False,
            "array": np.maximum(np.array([r.high for r in rows]) - shares, 0.0),
            "arrayminus": np.maximum(shares - np.array([r.low for r in rows]), 0.0),
            "color": INK,
            "thickness": 1.2,
        },
        hovertext=[
            label(f"{r.name}: {r.share:.1%} (interval {r.low:.1%} to {r.high:.1%})") for r in rows
        ],
        hoverinfo="text",
    )
    height = 120 + 34 * len(rows)
    return go.Figure(
        trace,
        layout(
            height=height,
            xaxis=axis("share of importance", tickformat=".0%", rangemode="tozero"),
            yaxis=axis("", autorange="reversed"),
            showlegend=False,
        ),
    )


def varying(tables: StudyTables) -> list[ParamInfo]:
    return [p for p in tables.params if p.varies]


def response_figure(tables: StudyTables) -> Drawn:
    """One panel per varying parameter: the value of every completed trial against it."""
    done = tables.completed()
    params = varying(tables)
    if not done:
        return Missing("No completed trial yet, so there is no response to show.")
    if not params:
        return Missing("No searched parameter took more than one value.")
    rows = math.ceil(len(params) / COLUMNS)
    cols = min(COLUMNS, len(params))
    fig = make_subplots(rows=rows, cols=cols, horizontal_spacing=0.08, vertical_spacing=0.16)
    leader = best(tables)
    for index, info in enumerate(params):
        _response_panel(fig, info, done, leader, index // cols + 1, index % cols + 1)
    fig.update_layout(layout(height=80 + 260 * rows, showlegend=False))
    fig.update_yaxes(axis("", log=_wide(v.value for v in done)))
    return fig


def _response_panel(
    fig: go.Figure,
    info: ParamInfo,
    done: Sequence[TrialRow],
    leader: TrialRow | None,
    row: int,
    col: int,
) -> None:
    used = [t for t in done if info.name in t.params]
    others = [t for t in used if leader is None or t.number != leader.number]
    tops = [t for t in used if leader is not None and t.number == leader.number]
    name = template_label(info.name)
    x_format = "" if info.kind == "categorical" else ":.4g"
    template = f"trial #%{{customdata}}<br>{name} %{{x{x_format}}}<br>value %{{y:.4g}}"
    for group, colour, size in ((others, TEAL, 6), (tops, AMBER, 10)):
        if group:
            fig.add_trace(
                go.Scatter(
                    x=_xs(info, [t.params[info.name] for t in group]),
                    y=numbers(t.value for t in group),
                    customdata=np.array([t.number for t in group], dtype=np.int32),
                    mode="markers",
                    marker={"color": colour, "size": size, "opacity": 0.75},
                    **hover(template),
                ),
                row=row,
                col=col,
            )
    fig.update_xaxes(_param_axis(info), row=row, col=col)


def _xs(info: ParamInfo, values: Sequence[Any]) -> Any:
    """Categorical values as escaped labels; numbers as a float array."""
    if info.kind == "categorical":
        return [label(v) for v in values]
    return numbers(values)


def _x(info: ParamInfo, value: Any) -> Any:
    return label(value) if info.kind == "categorical" else value


def _param_axis(info: ParamInfo) -> dict[str, Any]:
    if info.kind == "categorical":
        order = [label(c) for c in info.choices]
        return axis(label(info.name), type="category", categoryorder="array", categoryarray=order)
    return axis(label(info.name), log=info.log)


def _wide(values: Any) -> bool:
    """Whether positive values span more than two orders of magnitude (then use a log axis)."""
    finite = np.array([v for v in values if math.isfinite(v)])
    return bool(finite.size and finite.min() > 0 and finite.max() / finite.min() > 100)


def strongest_pair(
    tables: StudyTables, result: ImportanceResult
) -> tuple[ParamInfo, ParamInfo] | None:
    """The two most important varying parameters (by name order when importance is missing)."""
    infos = {p.name: p for p in varying(tables)}
    ranked = [r.name for r in result.rows if r.name in infos] or sorted(infos)
    if len(ranked) < 2:
        return None
    return infos[ranked[0]], infos[ranked[1]]


def pair_figure(tables: StudyTables, result: ImportanceResult) -> Drawn:
    """Median value over a grid of the strongest pair, with every trial drawn on top."""
    pair = strongest_pair(tables, result)
    if pair is None:
        return Missing("A map needs two searched parameters that took more than one value.")
    a, b = pair
    done = [t for t in tables.completed() if a.name in t.params and b.name in t.params]
    if len(done) < MIN_PAIR_TRIALS:
        return Missing(
            f"A map needs {MIN_PAIR_TRIALS} completed trials that set both {a.name} and {b.name}."
        )
    xa, xb = _bins(a, [t.params[a.name] for t in done]), _bins(b, [t.params[b.name] for t in done])
    grid = _binned_median(done, a, b, xa, xb)
    heat = go.Heatmap(
        x=xa.axis,
        y=xb.axis,
        z=grid,
        **value_scale(tables.summary.direction),
        colorbar={"title": {"text": "median value"}},
        hoverongaps=False,
        hoverinfo="z",
    )
    dots = go.Scatter(
        x=_xs(a, [t.params[a.name] for t in done]),
        y=_xs(b, [t.params[b.name] for t in done]),
        customdata=np.array([[t.number, t.value] for t in done], dtype=np.float64),
        mode="markers",
        marker={"color": INK, "size": 4, "opacity": 0.55},
        **hover("trial #%{customdata[0]}: value %{customdata[1]:.4g}"),
    )
    return go.Figure(
        [heat, dots],
        layout(height=460, xaxis=_param_axis(a), yaxis=_param_axis(b), showlegend=False),
    )


class _Binning:
    """Where each trial falls along one parameter, and what the heatmap's axis shows."""

    def __init__(self, index: np.ndarray, axis: list[Any], count: int) -> None:
        self.index, self.axis, self.count = index, axis, count


def _bins(info: ParamInfo, values: Sequence[Any]) -> _Binning:
    if info.kind == "categorical":
        order = [label(c) for c in info.choices]
        lookup = {name: i for i, name in enumerate(order)}
        index = np.array([lookup.get(label(v), 0) for v in values])
        return _Binning(index, order, len(order))
    data = np.array(values, dtype=float)
    scaled = np.log10(data) if info.log else data
    low, high = float(scaled.min()), float(scaled.max())
    if high == low:  # these trials all share one value; give the single column some width
        low, high = low - 0.5, high + 0.5
    edges = np.linspace(low, high, PAIR_BINS + 1)
    index = np.clip(np.searchsorted(edges, scaled, side="right") - 1, 0, PAIR_BINS - 1)
    shown = 10**edges if info.log else edges
    return _Binning(index, list(shown), PAIR_BINS)


def _binned_median(
    done: Sequence[TrialRow], a: ParamInfo, b: ParamInfo, xa: _Binning, xb: _Binning
) -> list[list[float | None]]:
    cells: dict[tuple[int, int], list[float]] = {}
    for trial, i, j in zip(done, xa.index, xb.index, strict=True):
        cells.setdefault((int(j), int(i)), []).append(trial.value)
    return [
        [float(np.median(cells[(j, i)])) if (j, i) in cells else None for i in range(xa.count)]
        for j in range(xb.count)
    ]
