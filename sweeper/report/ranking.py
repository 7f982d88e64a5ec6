"""Orderings of trials: best first, the leaders, and the cost-quality Pareto front."""

from __future__ import annotations

import math
from collections.abc import Sequence

from sweeper.report.collect import StudyTables, TrialRow

_STATE_ORDER = {"COMPLETE": 0, "PRUNED": 1, "RUNNING": 2, "WAITING": 3, "FAIL": 4}


def state_label(row: TrialRow) -> str:
    """The state as the page names it (store.trial_words), also the key of its colour."""
    return row.word


def sort_key(direction: str, value: float) -> float:
    """Smaller is better; NaN sorts last."""
    if not math.isfinite(value):
        return math.inf
    return value if direction == "minimize" else -value


def ranked(tables: StudyTables) -> list[TrialRow]:
    """Completed trials best first, then stopped ones by their last value, then the rest."""
    direction = tables.summary.direction
    return sorted(
        tables.trials,
        key=lambda t: (_STATE_ORDER.get(t.state, 5), sort_key(direction, t.value), t.number),
    )


def leaders(tables: StudyTables, count: int = 5) -> list[TrialRow]:
    direction = tables.summary.direction
    return sorted(tables.completed(), key=lambda t: sort_key(direction, t.value))[:count]


def best(tables: StudyTables) -> TrialRow | None:
    top = leaders(tables, 1)
    return top[0] if top else None


def pareto_front(rows: Sequence[TrialRow], direction: str) -> list[TrialRow]:
    """Trials that no other trial beats on both compute seconds and value, cheapest first."""
    usable = [r for r in rows if math.isfinite(r.value) and math.isfinite(r.seconds)]
    usable.sort(key=lambda r: (r.seconds, sort_key(direction, r.value)))
    front: list[TrialRow] = []
    for row in usable:
        if not front or sort_key(direction, row.value) < sort_key(direction, front[-1].value):
            front.append(row)
    return front
