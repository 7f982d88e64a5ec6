"""Gradient health, failures and retries: the sections that explain what went wrong."""

from __future__ import annotations

import math

import numpy as np

from sweeper.report.collect import StudyTables
from sweeper.report.escape import esc
from sweeper.report.figures_gradients import clip_rate_figure, norm_clip_figure, norm_curves_figure
from sweeper.report.gradients import advice, gradient_table
from sweeper.report.html_parts import Cell, FigureBook, missing, num, para, section, table
from sweeper.report.ranking import state_label

TRACEBACKS_SHOWN = 20


def health_section(tables: StudyTables, book: FigureBook) -> str:
    rows = gradient_table(tables)
    items = "".join(f'<li class="{esc(a.level)}">{esc(a.text)}</li>' for a in advice(tables, rows))
    parts = [
        f'<ul class="advice">{items}</ul>',
        "<h3>Pre-clip norm against the clip threshold</h3>",
        book.slot(
            "norm-clip",
            norm_clip_figure(rows),
            "Each point is a trial: the largest per-epoch 95th percentile of its pre-clip "
            "global norm. Above the dotted line the threshold cuts most large steps.",
        ),
        "<h3>How often trials clip</h3>",
        book.slot(
            "clip-rate",
            clip_rate_figure(tables, rows),
            "Share of optimizer steps clipped, against the trial's value.",
        ),
        "<h3>Norms across epochs</h3>",
        book.slot(
            "norm-curves",
            norm_curves_figure(tables, rows),
            "Median pre-clip norm per epoch: leaders solid, trials with trouble dashed.",
        ),
        "<h3>Diverged trials</h3>",
        _diverged_table(tables),
    ]
    return section("gradients", "Gradient health", *parts)


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


def failures_section(tables: StudyTables) -> str:
    failed = [t for t in tables.trials if t.state == "FAIL"]
    if not failed:
        return section("failures", "Failures", missing("No trial failed."))
    rows = [
        [
            Cell(f"#{t.number}", str(t.number), "num"),
            t.worker,
            t.failure.kind if t.failure else "",
            t.failure.message if t.failure else t.end_reason,
        ]
        for t in failed
    ]
    details = [
        f"<details><summary>Traceback of trial #{t.number}</summary>"
        f"<pre>{esc(t.failure.traceback)}</pre></details>"
        for t in failed[:TRACEBACKS_SHOWN]
        if t.failure and t.failure.traceback
    ]
    more = len(failed) - TRACEBACKS_SHOWN
    extra = para(f"Tracebacks of {more} more failures are in the export.") if more > 0 else ""
    return section(
        "failures",
        "Failures",
        table(["trial", "worker", "error", "message"], rows, sortable=True),
        *details,
        extra,
    )


def retries_section(tables: StudyTables) -> str:
    by_number = {t.number: t for t in tables.trials}
    retries = [t for t in tables.trials if t.retry_of is not None]
    if not retries:
        return section("retries", "Retries", missing("No trial was retried."))
    rows = []
    for trial in retries:
        original = by_number.get(trial.retry_of) if trial.retry_of is not None else None
        first = state_label(original) if original else "not in the study"
        rows.append(
            [
                Cell(f"#{trial.number}", str(trial.number), "num"),
                Cell(f"#{trial.retry_of}", str(trial.retry_of), "num"),
                first,
                state_label(trial),
                num(trial.value),
            ]
        )
    return section(
        "retries",
        "Retries",
        table(
            ["trial", "retries trial", "first attempt", "this attempt", "value"],
            rows,
            sortable=True,
        ),
    )
