"""sweeper's own look for figures: palette, fonts and the layout every figure starts from."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import plotly.graph_objects as go

INK = "#1f2b33"
PAPER = "#fbfaf6"
GRID = "#e4e0d6"
MUTED = "#7d8790"
TEAL = "#1f7a72"
AMBER = "#d98e04"
BRICK = "#b5473a"
PLUM = "#6d2e46"
SKY = "#3d7fb5"
OLIVE = "#7a8f2e"

SERIES = (TEAL, AMBER, SKY, BRICK, OLIVE, PLUM, "#4f5d6b", "#c26d9b")
STATE_COLOURS = {
    "COMPLETE": TEAL,
    "PRUNED": "#9aa5ae",
    "DIVERGED": BRICK,
    "FAIL": PLUM,
    "RUNNING": AMBER,
    "WAITING": "#cbbfa6",
}
# Better values are drawn warm and bright; the scale is reversed for maximised objectives.
VALUE_SCALE = [[0.0, AMBER], [0.35, "#e8cf8a"], [0.65, "#5fa39a"], [1.0, "#173f4f"]]
FONT = "Iosevka, 'Fira Sans', 'Segoe UI', Helvetica, Arial, sans-serif"


@dataclass(frozen=True)
class Missing:
    """A figure that could not be drawn, with the reason shown in its place."""

    reason: str


Drawn = go.Figure | Missing


def axis(title: str, *, log: bool = False, **extra: Any) -> dict[str, Any]:
    spec: dict[str, Any] = {
        "title": {"text": title},
        "gridcolor": GRID,
        "zerolinecolor": GRID,
        "linecolor": MUTED,
        "automargin": True,
    }
    if log:
        spec["type"] = "log"
    spec.update(extra)
    return spec


def layout(height: int = 380, **extra: Any) -> dict[str, Any]:
    """The base layout; sections add axes and legends."""
    spec: dict[str, Any] = {
        "template": "none",
        "height": height,
        "margin": {"l": 60, "r": 24, "t": 28, "b": 52},
        "paper_bgcolor": PAPER,
        "plot_bgcolor": PAPER,
        "font": {"family": FONT, "color": INK, "size": 12},
        "colorway": list(SERIES),
        "hoverlabel": {"bgcolor": "#ffffff", "bordercolor": INK},
        "legend": {"bgcolor": "rgba(0,0,0,0)", "orientation": "h", "y": -0.2},
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
