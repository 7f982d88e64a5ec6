"""The headline numbers and the ranked table of trials."""

from __future__ import annotations

import math
from collections import Counter
from datetime import datetime

from sweeper.report.collect import StudyTables, TrialRow
from sweeper.report.escape import esc
from sweeper.report.html_parts import Cell, duration, fmt, missing, num, para, section, table
from sweeper.report.ranking import best, ranked, state_label

STATE_LABELS = ("completed", "stopped early", "diverged", "failed", "running", "waiting")


def outcome_section(tables: StudyTables) -> str:
    cards = [_best_card(tables), _states_card(tables), _time_card(tables), _workers_card(tables)]
    grid = '<div class="cards">' + "".join(cards) + "</div>"
    return section("outcome", "Outcome", grid, _task_line(tables))


def _card(title: str, main: str, *lines: str) -> str:
    rest = "".join(f"<li>{esc(line)}</li>" for line in lines if line)
    head = f'<h3>{esc(title)}</h3><p class="big">{esc(main)}</p>'
    return f'<div class="card">{head}<ul>{rest}</ul></div>'


def _best_card(tables: StudyTables) -> str:
    top = best(tables)
    objective = tables.summary.objective or "value"
    if top is None:
        return _card("Best so far", "none yet", "No trial has completed with a finite value.")
    return _card(
        "Best so far",
        f"{fmt(top.value)} {objective}",
        f"trial #{top.number} ({tables.summary.direction} {objective})",
        baseline_comparison(tables, top),
    )


def baseline_comparison(tables: StudyTables, top: TrialRow) -> str:
    """How the best trial compares with the task's baseline, in words."""
    base = tables.summary.baseline
    if base is None:
        return "This task has no baseline to compare with."
    measured, lower_better = _measured(tables, top, base.measure)
    about = f"baseline {fmt(base.value)}" + (f" ({base.description})" if base.description else "")
    if not math.isfinite(measured):
        return f"{about}; the best trial recorded no {base.measure} to compare."
    if lower_better is None or base.value == 0:
        return f"{base.measure} {fmt(measured)} against the {about}."
    beats = measured < base.value if lower_better else measured > base.value
    change = abs(measured - base.value) / abs(base.value)
    side = "lower" if measured < base.value else "higher"
    verdict = "Beats" if beats else "Does not beat"
    return f"{verdict} the {about}: {base.measure} {fmt(measured)} is {change:.0%} {side}."


def _measured(tables: StudyTables, top: TrialRow, measure: str) -> tuple[float, bool | None]:
    """The best trial's value of the baseline's measure, and whether lower is better for it."""
    summary = tables.summary
    if measure == summary.objective:
        return top.value, summary.direction == "minimize"
    series = tables.series.get(top.number, {}).get(measure)
    last = float(series[-1]) if series is not None and series.size else math.nan
    return last, (True if measure == "valid_loss" else None)


def _states_card(tables: StudyTables) -> str:
    counts = Counter(state_label(t) for t in tables.trials)
    finished = sum(1 for t in tables.trials if t.state in ("COMPLETE", "PRUNED"))
    budget = tables.summary.budget
    lines = [f"{counts[name]} {name}" for name in STATE_LABELS if counts[name]]
    if budget:
        lines.append(f"{finished} of a budget of {budget} finished (failures do not count)")
    return _card("Trials", f"{len(tables.trials)} trials", *lines)


def _time_card(tables: StudyTables) -> str:
    starts = [t.start for t in tables.trials if t.start is not None]
    ends = [t.end for t in tables.trials if t.end is not None]
    compute = sum(t.seconds for t in tables.trials if math.isfinite(t.seconds))
    if not starts:
        return _card("Time", "not started", "No trial has a start time.")
    wall = (max(ends + starts) - min(starts)).total_seconds()
    return _card(
        "Time",
        f"{duration(wall)} wall",
        f"{duration(compute)} of compute across trials",
        f"from {_when(min(starts))} to {_when(max(ends + starts))}",
    )


def _when(moment: datetime) -> str:
    return moment.strftime("%Y-%m-%d %H:%M")


def _workers_card(tables: StudyTables) -> str:
    seen = Counter(t.worker for t in tables.trials if t.worker)
    planned = tables.summary.workers_planned
    main = f"{len(seen)} seen" if seen else "none recorded"
    lines = [f"{planned} planned in the spec" if planned else ""]
    lines += [f"{name}: {count} trials" for name, count in seen.most_common(4)]
    if len(seen) > 4:
        lines.append(f"and {len(seen) - 4} more")
    return _card("Workers", main, *lines)


def _task_line(tables: StudyTables) -> str:
    s = tables.summary
    bits = [f"Study {s.name} on {s.location}"]
    if s.task:
        bits.append(f"task {s.task}" + (f": {s.task_description}" if s.task_description else ""))
    if s.metric_name:
        bits.append(f"metric {s.metric_name}")
    return para("; ".join(bits) + ".", "context")


def ranked_section(tables: StudyTables) -> str:
    if not tables.trials:
        return section("ranked", "Trials, best first", missing("The study has no trials yet."))
    names = [p.name for p in tables.params]
    headers = [
        "rank",
        "trial",
        "state",
        "value",
        "epochs",
        "compute s",
        "worker",
        *names,
        "end reason",
    ]
    rows = []
    rank = 0
    for trial in ranked(tables):
        done = trial.state == "COMPLETE" and math.isfinite(trial.value)
        rank += done
        rows.append(
            [
                Cell(str(rank), str(rank), "num") if done else Cell("", ""),
                Cell(f"#{trial.number}", str(trial.number), "num"),
                Cell(state_label(trial), css=f"state {state_label(trial).replace(' ', '-')}"),
                num(trial.value),
                Cell(str(trial.epochs), str(trial.epochs), "num"),
                num(trial.seconds, 3),
                trial.worker,
                *[_param_cell(trial, name) for name in names],
                trial.end_reason,
            ]
        )
    hint = para("Click a column heading to sort by it; click again to reverse.", "hint")
    return section("ranked", "Trials, best first", hint, table(headers, rows, sortable=True))


def _param_cell(trial: TrialRow, name: str) -> Cell:
    if name not in trial.params:
        return Cell("", "")
    value = trial.params[name]
    if name == "clip" and value == 0:
        return Cell("off", "0", "num")  # our convention: a zero threshold turns clipping off
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return num(float(value))
    return Cell(str(value))
