"""Where training breaks: the stability map, the gradient findings in words, diverged trials."""

from __future__ import annotations

import math

import numpy as np

from sweeper.report.collect import StudyTables
from sweeper.report.escape import esc
from sweeper.report.figures_gradients import norm_clip_figure, norm_curves_figure
from sweeper.report.figures_stability import stability_figure
from sweeper.report.gradient_findings import MOSTLY_CLIPPED, advice, gradient_table
from sweeper.report.html_parts import Cell, FigureBook, missing, num, section, table


def stability_section(tables: StudyTables, book: FigureBook) -> str:
    rows = gradient_table(tables)
    items = "".join(f'<li class="{esc(a.level)}">{esc(a.text)}</li>' for a in advice(tables, rows))
    parts = [
        f'<ul class="advice">{items}</ul>',
        "<h3>Learning rate against clip threshold</h3>",
        book.slot(
            "stability",
            stability_figure(rows),
            "Each mark is a trial: a red cross diverged, an olive square clipped more than "
            f"{MOSTLY_CLIPPED:.0%} of its steps (the threshold set its step size), a teal "
            "circle trained without either.",
        ),
        "<h3>Does the threshold bite?</h3>",
        book.slot(
            "norm-clip",
            norm_clip_figure(rows),
            "Each mark is a trial: the largest per-epoch 95th percentile of its pre-clip "
            "global norm. Above the dotted line the threshold cuts most large steps.",
        ),
        "<h3>Norms across epochs</h3>",
        book.slot(
            "norm-curves",
            norm_curves_figure(tables, rows),
            "Median pre-clip norm per epoch: leaders solid, trials with trouble dashed, "
            "diverged ones red.",
        ),
        "<h3>Diverged trials</h3>",
        _diverged_table(tables),
    ]
    return section("stability", "Where training breaks", *parts)


def _diverged_table(tables: StudyTables) -> str:
    diverged = [t for t in tables.trials if t.diverged]
    if not diverged:
        return missing("No trial diverged.")
    rows = []
    for trial in diverged:
        series = tables.series.get(trial.number, {})
        last = _last_finite(series.get("grad_norm_p95"))
        clip = Cell("off", "0", "num") if trial.clip == 0 else num(trial.clip)
        rows.append(
            [
                Cell(f"#{trial.number}", str(trial.number), "num"),
                num(trial.lr),
                clip,
                Cell(str(trial.epochs), str(trial.epochs), "num"),
                num(last, 3),
                trial.end_reason,
            ]
        )
    headers = ["trial", "lr", "clip", "epochs done", "last finite p95 norm", "reason"]
    return table(headers, rows, sortable=True)


def _last_finite(values: np.ndarray | None) -> float:
    if values is None:
        return math.nan
    finite = values[np.isfinite(values)]
    return float(finite[-1]) if finite.size else math.nan
