"""Sections built around figures: what mattered, responses, curves, cost and the timeline."""

from __future__ import annotations

from sweeper.report.collect import StudyTables
from sweeper.report.escape import esc
from sweeper.report.figures_params import (
    importance_figure,
    pair_figure,
    response_figure,
    strongest_pair,
)
from sweeper.report.figures_trials import (
    cost_figure,
    curves_figure,
    stopped_sample,
    timeline_figure,
)
from sweeper.report.html_parts import Cell, FigureBook, num, para, section, table
from sweeper.report.importance import TOP_QUANTILE, ImportanceResult
from sweeper.report.ranking import pareto_front


def importance_section(tables: StudyTables, result: ImportanceResult, book: FigureBook) -> str:
    parts = [book.slot("importance", importance_figure(result))]
    if result.rows:
        parts.append(
            para(
                f"Rests on {result.trials_used} completed trials. Importance is how strongly "
                f"a parameter sets the best {TOP_QUANTILE:.0%} of trials apart from the rest "
                f"(PED-ANOVA), as a share of the total; the interval is the central "
                f"{result.level:.0%} of {result.replicates} bootstrap resamples of the trials."
            )
        )
        rows = [[r.name, num(r.share, 3), num(r.low, 3), num(r.high, 3)] for r in result.rows]
        parts.append(table(["parameter", "share", "interval low", "interval high"], rows))
    if result.fixed:
        parts.append(
            para("Held at one value in every completed trial: " + ", ".join(result.fixed) + ".")
        )
    return section("importance", "What mattered", *parts)


def response_section(tables: StudyTables, result: ImportanceResult, book: FigureBook) -> str:
    fixed = [p.name for p in tables.params if not p.varies]
    parts = [
        book.slot(
            "response",
            response_figure(tables),
            "Each point is a completed trial; the best one is highlighted.",
        ),
        para("Searched but held at one value: " + ", ".join(fixed) + ".") if fixed else "",
    ]
    pair = strongest_pair(tables, result)
    title = (
        f"The strongest pair: {pair[0].name} and {pair[1].name}" if pair else "The strongest pair"
    )
    parts += [
        f"<h3>{esc(title)}</h3>",
        book.slot(
            "pair",
            pair_figure(tables, result),
            "Cells show the median value of the trials inside them; dots are the trials.",
        ),
    ]
    return section("response", "How the value responds", *parts)


def curves_section(tables: StudyTables, book: FigureBook) -> str:
    shown, total = stopped_sample(tables)
    caption = "The leaders in colour; stopped-early trials in grey"
    caption += f" ({len(shown)} of {total} shown)" if total > len(shown) else ""
    caption += "; diverged trials in red."
    return section("curves", "Learning curves", book.slot("curves", curves_figure(tables), caption))


def cost_section(tables: StudyTables, book: FigureBook) -> str:
    front = pareto_front(tables.completed(), tables.summary.direction)
    parts = [
        book.slot("cost", cost_figure(tables), "The line joins trials that no cheaper trial beats.")
    ]
    if front:
        rows = [
            [Cell(f"#{t.number}", str(t.number), "num"), num(t.seconds, 4), num(t.value)]
            for t in front
        ]
        parts.append(table(["trial", "compute s", "value"], rows))
    return section("cost", "Cost and quality", *parts)


def timeline_section(tables: StudyTables, book: FigureBook) -> str:
    return section(
        "timeline",
        "Who ran what, when",
        book.slot(
            "timeline",
            timeline_figure(tables),
            "One lane per worker; bars run from a trial's start to its end.",
        ),
    )
