"""The stability map: learning rate against clip threshold, each trial drawn by its outcome."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import plotly.graph_objects as go

from sweeper.report.escape import label
from sweeper.report.gradient_findings import MOSTLY_CLIPPED, TrialGradients
from sweeper.report.theme import (
    CLIPPED_MOST,
    HEALTH,
    HEALTHY,
    MUTED,
    Drawn,
    Missing,
    axis,
    clipping_off_at,
    hover,
    layout,
    numbers,
)
from sweeper.store import trial_words as words

JITTER = 0.03  # decades; spreads trials that share a value
SETTLED = (words.FINISHED, words.CONFIRMATION, words.STOPPED, words.DIVERGED)


def health(row: TrialGradients) -> str:
    """Diverged, clipped on most steps (clipping sets the step size), or healthy."""
    if row.diverged:
        return words.DIVERGED
    if row.clip > 0 and row.clip_rate > MOSTLY_CLIPPED:
        return CLIPPED_MOST
    return HEALTHY


def stability_figure(rows: Sequence[TrialGradients]) -> Drawn:
    usable = [
        r for r in rows if r.state in SETTLED and r.lr > 0 and math.isfinite(r.clip) and r.clip >= 0
    ]
    if not usable:
        return Missing("No settled trial recorded both a learning rate and a clip threshold.")
    thresholds = [r.clip for r in usable if r.clip > 0]
    off_y = clipping_off_at(thresholds)
    rng = np.random.default_rng(0)
    template = (
        "trial #%{customdata[0]}: %{meta}<br>lr %{customdata[1]:.3g}, clip %{customdata[2]:.3g}"
        "<br>clipped %{customdata[3]:.0%} of steps"
    )
    traces = []
    for kind in (HEALTHY, CLIPPED_MOST, words.DIVERGED):
        group = [r for r in usable if health(r) == kind]
        if not group:
            continue
        colour, symbol = HEALTH[kind]
        clip = numbers(r.clip for r in group)
        spread = 10 ** rng.uniform(-JITTER, JITTER, (2, len(group)))
        traces.append(
            go.Scatter(
                x=numbers(r.lr for r in group) * spread[0],
                y=np.where(clip > 0, clip, off_y) * spread[1],
                customdata=np.array(
                    [[r.number, r.lr, r.clip, r.clip_rate] for r in group], dtype=np.float64
                ),
                meta=label(kind),
                mode="markers",
                name=label(kind),
                marker={"color": colour, "symbol": symbol, "size": 8, "opacity": 0.8},
                **hover(template),
            )
        )
    fig = go.Figure(
        traces,
        layout(
            height=420,
            xaxis=axis("learning rate", log=True, values=[r.lr for r in usable]),
            yaxis=axis("clip threshold", log=True, values=[*thresholds, off_y]),
        ),
    )
    if len(thresholds) < len(usable):
        fig.add_hline(y=off_y, line={"color": MUTED, "width": 1, "dash": "dot"})
        fig.add_annotation(
            x=0,
            xref="paper",
            y=math.log10(off_y),
            text="clipping off",
            showarrow=False,
            xanchor="left",
            yanchor="bottom",
            font={"color": MUTED},
        )
    return fig
