"""Operations, folded at the end: time and workers, failures, interruptions, retries,
the workers' timeline and the stored spec."""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import datetime

from sweeper.report.collect import StudyTables, TrialRow
from sweeper.report.escape import esc
from sweeper.report.figures_trials import timeline_figure
from sweeper.report.html_parts import Cell, FigureBook, duration, missing, num, para, table
from sweeper.store import trial_words as words

TRACEBACKS_SHOWN = 20


def operations_section(tables: StudyTables, book: FigureBook) -> str:
    parts = [
        _time_and_workers(tables),
        "<h3>Failures</h3>",
        failures_part(tables),
        "<h3>Interruptions</h3>",
        _interruptions(tables),
        "<h3>Retries</h3>",
        retries_part(tables),
        "<h3>Who ran what, when</h3>",
        book.slot(
            "timeline",
            timeline_figure(tables),
            "One lane per worker process; a bar runs from a trial's start to its end.",
        ),
        "<h3>The stored spec</h3>",
        _spec(tables),
    ]
    body = "\n".join(p for p in parts if p)
    return (
        '<section id="operations">\n<h2>Operations</h2>\n'
        f'<details class="fold"><summary>{esc(_fold_line(tables))}</summary>\n{body}\n'
        "</details>\n</section>"
    )


def _fold_line(tables: StudyTables) -> str:
    failed = sum(1 for t in tables.trials if t.word == words.FAILED)
    interrupted = sum(1 for t in tables.trials if t.word == words.INTERRUPTED)
    retried = sum(1 for t in tables.trials if t.retry_of is not None)
    return (
        f"Time, workers, {failed} failed, {interrupted} interrupted, {retried} retried, "
        "the timeline and the spec"
    )


def peak_concurrency(trials: Sequence[TrialRow]) -> int:
    """The most trials that ran at the same moment (a trial still running runs until now)."""
    events: list[tuple[datetime, int]] = []
    for trial in trials:
        if trial.start is None:
            continue
        events.append((trial.start, 1))
        if trial.end is not None:
            events.append((trial.end, -1))
    running = peak = 0
    for _, change in sorted(events, key=lambda e: (e[0], e[1])):  # an end before a start
        running += change
        peak = max(peak, running)
    return peak


def workers_line(tables: StudyTables) -> str:
    processes = {t.worker for t in tables.trials if t.worker}
    if not processes:
        return "No worker was recorded."
    peak = peak_concurrency(tables.trials)
    text = f"At most {peak} trial{'s' if peak != 1 else ''} ran at once"
    planned = tables.summary.workers_planned
    if planned:
        text += f" ({planned} worker{'s' if planned != 1 else ''} in the spec)"
    many = len(processes)
    text += f"; {many} worker process{'es' if many != 1 else ''} took part over the study"
    return text + " (each launch starts its own)."


def _time_and_workers(tables: StudyTables) -> str:
    starts = [t.start for t in tables.trials if t.start is not None]
    ends = [t.end for t in tables.trials if t.end is not None]
    compute = sum(t.seconds for t in tables.trials if math.isfinite(t.seconds))
    lines = [workers_line(tables)]
    if starts:
        first, last = min(starts), max(ends + starts)
        lines.insert(
            0,
            f"{duration((last - first).total_seconds())} from the first start to the last end "
            f"({first:%Y-%m-%d %H:%M} to {last:%Y-%m-%d %H:%M}); {duration(compute)} of "
            "compute across trials.",
        )
    return "".join(para(line) for line in lines)


def failures_part(tables: StudyTables) -> str:
    failed = [t for t in tables.trials if t.word == words.FAILED]
    if not failed:
        return para("No trial failed.", "context")
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
    parts = [table(["trial", "worker", "error", "message"], rows, sortable=True), *details, extra]
    return "\n".join(p for p in parts if p)


def _interruptions(tables: StudyTables) -> str:
    stopped = [t for t in tables.trials if t.word == words.INTERRUPTED]
    if not stopped:
        return para("No trial was interrupted.", "context")
    rows = [[Cell(f"#{t.number}", str(t.number), "num"), t.worker, t.end_reason] for t in stopped]
    note = para("A stop request ended these trials; the next launch continues each one.")
    return note + table(["trial", "worker", "what happened"], rows, sortable=True)


def retries_part(tables: StudyTables) -> str:
    by_number = {t.number: t for t in tables.trials}
    retries = [t for t in tables.trials if t.retry_of is not None]
    if not retries:
        return para("No trial was retried.", "context")
    rows = []
    for trial in retries:
        original = by_number.get(trial.retry_of) if trial.retry_of is not None else None
        rows.append(
            [
                Cell(f"#{trial.number}", str(trial.number), "num"),
                Cell(f"#{trial.retry_of}", str(trial.retry_of), "num"),
                original.word if original else "not in the study",
                trial.word,
                num(trial.value),
            ]
        )
    headers = ["trial", "in place of trial", "first attempt", "this attempt", "value"]
    return table(headers, rows, sortable=True)


def _spec(tables: StudyTables) -> str:
    text = tables.summary.spec_text
    if not text:
        return missing("The study does not store its spec.")
    digest = f" (hash {tables.summary.spec_hash})" if tables.summary.spec_hash else ""
    return f"<p>{esc('Spec stored in the study' + digest)}</p><pre>{esc(text)}</pre>"
