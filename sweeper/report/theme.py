"""sweeper's own look for figures: palette, markers and the layout every figure starts from.

One meaning per colour, on every figure: red is divergence and nothing else; amber is the
choice (the best trial, the frontier, best so far); each trial outcome has its colour and
its marker, so that the outcome still reads in grey print or for a colour-blind reader.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import plotly.graph_objects as go

from sweeper.store import trial_words as words

INK = "#1f2b33"
PAPER = "#fbfaf6"
GRID = "#e4e0d6"
MUTED = "#7d8790"
TEAL = "#1f7a72"
NAVY = "#173f4f"
AMBER = "#d98e04"  # the choice
RED = "#b5473a"  # divergence, only
PLUM = "#6d2e46"
SKY = "#3d7fb5"
OLIVE = "#7a8f2e"
KHAKI = "#a08a5c"
SAND = "#cbbfa6"
SLATE = "#5d6d7a"  # quantities that are not trials (importance shares)

# Outcome of a trial: (colour, marker symbol), keyed by our state words.
OUTCOMES: dict[str, tuple[str, str]] = {
    words.FINISHED: (TEAL, "circle"),
    words.CONFIRMATION: (NAVY, "star"),
    words.STOPPED: ("#9aa5ae", "circle-open"),
    words.DIVERGED: (RED, "x"),
    words.FAILED: (PLUM, "triangle-down"),
    words.INTERRUPTED: (KHAKI, "square-open"),
    words.RUNNING: (SKY, "diamond-open"),
    words.WAITING: (SAND, "circle-open"),
}
STATE_COLOURS = {word: colour for word, (colour, _) in OUTCOMES.items()}
# Gradient health of a trial on the stability map: (colour, marker).
HEALTHY, CLIPPED_MOST = "healthy", "clipped most steps"
HEALTH: dict[str, tuple[str, str]] = {
    HEALTHY: (TEAL, "circle"),
    CLIPPED_MOST: (OLIVE, "square"),
    words.DIVERGED: (RED, "x"),
}
# Leading trials by rank: the first is the choice, in amber; no red among them.
RANKS = (AMBER, "#3d6e8f", "#8a6fae", "#4f5d6b", "#c26d9b", "#5c8a5a")
BASELINE_LINE = {"color": INK, "dash": "dash", "width": 1.5}
# Better values are drawn warm and bright; the scale is reversed for maximised objectives.
VALUE_SCALE = [[0.0, AMBER], [0.35, "#e8cf8a"], [0.65, "#5fa39a"], [1.0, NAVY]]
FONT = "Iosevka, 'Fira Sans', 'Segoe UI', Helvetica, Arial, sans-serif"


@dataclass(frozen=True)
class Missing:
    """A figure that could not be drawn, with the reason shown in its place."""

    reason: str


Drawn = go.Figure | Missing


def outcome_marker(word: str, size: int = 7) -> dict[str, Any]:
    colour, symbol = OUTCOMES.get(word, (MUTED, "circle"))
    return {
        "color": colour,
        "symbol": symbol,
        "size": size,
        "line": {"color": colour, "width": 1.5},
    }


MOST_TICKS = 5


def log_ticks(values: Any, most: int = MOST_TICKS) -> list[float]:
    """At most ``most`` round ticks (1-2-5, then 1-3, then whole decades, thinned) spanning the
    positive finite ``values``; empty when there are none, so the chart library decides."""
    data = np.asarray([v for v in values if v is not None], dtype=np.float64)
    data = data[np.isfinite(data) & (data > 0)]
    if not data.size:
        return []
    low, high = float(data.min()), float(data.max())
    decades = range(math.floor(math.log10(low)), math.ceil(math.log10(high)) + 1)
    for steps in ((1, 2, 5), (1, 3), (1,)):
        ticks = [m * 10.0**d for d in decades for m in steps if low <= m * 10.0**d <= high]
        if 2 <= len(ticks) <= most:
            return ticks
    whole = [10.0**d for d in decades if low <= 10.0**d <= high]
    if len(whole) > most:
        step = math.ceil(len(whole) / most)
        return whole[::step]
    # a range narrower than 1 to 2: its two ends, rounded
    return sorted({float(f"{low:.2g}"), float(f"{high:.2g}")})


def axis(title: str, *, log: bool = False, values: Any = None, **extra: Any) -> dict[str, Any]:
    """An axis with its title; a log axis gets few, plain ticks (``log_ticks`` of ``values``)."""
    spec: dict[str, Any] = {
        "title": {"text": title},
        "gridcolor": GRID,
        "zerolinecolor": GRID,
        "linecolor": MUTED,
        "automargin": True,
    }
    if log:
        spec.update({"type": "log", "nticks": MOST_TICKS, "tickformat": "~g"})
        ticks = log_ticks(values) if values is not None else []
        if ticks:
            spec.update({"tickmode": "array", "tickvals": ticks})
    spec.update(extra)
    return spec


def layout(height: int = 380, **extra: Any) -> dict[str, Any]:
    """The base layout; sections add axes. The legend sits above the plot, clear of titles."""
    spec: dict[str, Any] = {
        "template": "none",
        "autosize": True,
        "height": height,
        "margin": {"l": 56, "r": 16, "t": 16, "b": 48},
        "paper_bgcolor": PAPER,
        "plot_bgcolor": PAPER,
        "font": {"family": FONT, "color": INK, "size": 12},
        "colorway": list(RANKS),
        "hoverlabel": {"bgcolor": "#ffffff", "bordercolor": INK},
        "legend": {
            "bgcolor": "rgba(0,0,0,0)",
            "orientation": "h",
            "x": 0,
            "xanchor": "left",
            "y": 1.02,
            "yanchor": "bottom",
        },
    }
    spec.update(extra)
    return spec


def value_scale(direction: str) -> dict[str, Any]:
    return {"colorscale": VALUE_SCALE, "reversescale": direction == "maximize"}


def hover(template: str) -> dict[str, Any]:
    """Hover text from a plotly template over ``customdata``: far smaller than text per point."""
    return {"hovertemplate": template + "<extra></extra>"}


def numbers(values: Any) -> np.ndarray:
    """Floats as an array, which plotly stores in binary form (None becomes NaN, a gap)."""
    return np.array([math.nan if v is None else v for v in values], dtype=np.float64)


def clipping_off_at(thresholds: list[float]) -> float:
    """Where a trial without clipping (threshold 0) sits on a log clip axis: a quarter of the
    smallest threshold searched, or 1 when no trial clipped."""
    return min(thresholds) / 4 if thresholds else 1.0
