"""The operations sections: trials that failed, with their tracebacks, and their retries."""

from __future__ import annotations

from sweeper.report.collect import StudyTables
from sweeper.report.escape import esc
from sweeper.report.html_parts import Cell, missing, num, para, section, table
from sweeper.report.ranking import state_label

TRACEBACKS_SHOWN = 20


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
