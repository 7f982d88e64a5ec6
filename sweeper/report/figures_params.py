"""Figures about parameters: importance, the response to each one, and the strongest pair."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import plotly.graph_objects as go

from sweeper.report.collect import ParamInfo, StudyTables, TrialRow
from sweeper.report.escape import label, template_label
from sweeper.report.importance import ImportanceResult
from sweeper.report.ranking import best
from sweeper.report.theme import (
    AMBER,
    INK,
    SLATE,
    TEAL,
    Drawn,
    Missing,
    axis,
    hover,
    layout,
    numbers,
)


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
        marker={"color": SLATE},
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
            yaxis=axis("parameter", autorange="reversed"),
            showlegend=False,
        ),
    )


def varying(tables: StudyTables) -> list[ParamInfo]:
    return [p for p in tables.params if p.varies]


def response_figures(tables: StudyTables) -> list[tuple[str, Drawn]]:
    """A small figure per varying parameter, most important first: every finished trial's
    value against it. Separate figures, so that the page lays them out for its width."""
    done = tables.completed()
    params = varying(tables)
    if not done:
        return [("response", Missing("No finished trial yet, so there is no response to show."))]
    if not params:
        return [("response", Missing("No searched parameter took more than one value."))]
    leader = best(tables)
    objective = label(tables.summary.objective or "value")
    values = [t.value for t in done]
    y_axis = axis(objective, log=_wide(values), values=values)
    return [(info.name, _response_panel(info, done, leader, y_axis)) for info in params]


def _response_panel(
    info: ParamInfo,
    done: Sequence[TrialRow],
    leader: TrialRow | None,
    y_axis: dict[str, Any],
) -> go.Figure:
    used = [t for t in done if info.name in t.params]
    others = [t for t in used if leader is None or t.number != leader.number]
    tops = [t for t in used if leader is not None and t.number == leader.number]
    name = template_label(info.name)
    x_format = "" if info.kind == "categorical" else ":.4g"
    template = f"trial #%{{customdata}}<br>{name} %{{x{x_format}}}<br>value %{{y:.4g}}"
    traces = [
        go.Scatter(
            x=_xs(info, [t.params[info.name] for t in group]),
            y=numbers(t.value for t in group),
            customdata=np.array([t.number for t in group], dtype=np.int32),
            mode="markers",
            marker={"color": colour, "size": size, "opacity": 0.75},
            **hover(template),
        )
        for group, colour, size in ((others, TEAL, 6), (tops, AMBER, 11))
        if group
    ]
    return go.Figure(
        traces,
        layout(
            height=280,
            showlegend=False,
            xaxis=_param_axis(info, [t.params[info.name] for t in used]),
            yaxis=y_axis,
        ),
    )


def _xs(info: ParamInfo, values: Sequence[Any]) -> Any:
    """Categorical values as escaped labels; numbers as a float array."""
    if info.kind == "categorical":
        return [label(v) for v in values]
    return numbers(values)


def _x(info: ParamInfo, value: Any) -> Any:
    return label(value) if info.kind == "categorical" else value


def _param_axis(info: ParamInfo, values: Sequence[Any] = ()) -> dict[str, Any]:
    if info.kind == "categorical":
        order = [label(c) for c in info.choices]
        return axis(label(info.name), type="category", categoryorder="array", categoryarray=order)
    return axis(label(info.name), log=info.log, values=values)


def _wide(values: Any) -> bool:
    """Whether positive values span more than two orders of magnitude (then use a log axis)."""
    finite = np.array([v for v in values if math.isfinite(v)])
    return bool(finite.size and finite.min() > 0 and finite.max() / finite.min() > 100)
