"""Sections about memory, cost, what mattered and how the search went."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from sweeper.report.collect import StudyTables
from sweeper.report.figures_memory import memory_figure
from sweeper.report.figures_params import importance_figure, response_figures
from sweeper.report.figures_search import coverage_figure, progress_figure
from sweeper.report.figures_trials import cost_figure, curves_figure, stopped_sample
from sweeper.report.html_parts import Cell, FigureBook, num, para, section, table
from sweeper.report.importance import TOP_QUANTILE, Importance, ImportanceResult
from sweeper.report.ranking import pareto_front
from sweeper.report.sections_choice import ranked_table
from sweeper.report.task_facts import dependency_length

MIN_EXPLAINED = 0.5  # share of the variance a fit must explain before the page states it


def memory_section(tables: StudyTables, book: FigureBook) -> str:
    dependency = dependency_length(tables.summary)
    caption = "Top: each finished trial's score at its unroll length, the best as a star. "
    caption += "Bottom: what each trial cost in compute."
    if dependency is not None:
        caption += (
            f" The dashed line is the task's {dependency.name} of {dependency.steps} steps: "
            "gradients reach that far back only in a window at least as long."
        )
    parts = [book.slot("memory", memory_figure(tables, dependency), caption)]
    parts.append(_unroll_cost_line(tables))
    return section("memory", "How much memory the task needs", *parts)


def _unroll_cost_line(tables: StudyTables) -> str:
    """Compute per epoch against unroll, as a fitted power: how much a longer window costs."""
    usable = [
        t
        for t in tables.trials
        if math.isfinite(t.unroll) and t.unroll > 0 and math.isfinite(t.seconds) and t.seconds > 0
    ]
    usable = [t for t in usable if t.epochs > 0]
    if len({t.unroll for t in usable}) < 3:
        return ""
    x = np.log([t.unroll for t in usable])
    y = np.log([t.seconds / t.epochs for t in usable])
    slope, intercept = (float(c) for c in np.polyfit(x, y, 1))
    spread = float(np.var(y))
    explained = 1.0 - float(np.var(y - (slope * x + intercept))) / spread if spread > 0 else 1.0
    if explained < MIN_EXPLAINED:
        return para(
            f"Compute per epoch does not follow the unroll length clearly here (a power law "
            f"explains {explained:.0%} of its spread over {len(usable)} trials).",
            "context",
        )
    doubling = 2**slope
    return para(
        f"Compute per epoch grows about {doubling:.2f}× when the unroll doubles "
        f"(a power-law fit over {len(usable)} trials, exponent {slope:.2f}).",
        "context",
    )


def cost_section(tables: StudyTables, book: FigureBook) -> str:
    front = pareto_front(tables.completed(), tables.summary.direction)
    parts = [
        book.slot(
            "cost",
            cost_figure(tables),
            "Each dot is a finished trial; the amber line joins the trials that no cheaper "
            "trial beats.",
        )
    ]
    if front:
        rows = [
            [Cell(f"#{t.number}", str(t.number), "num"), num(t.seconds, 4), num(t.value)]
            for t in front
        ]
        parts.append("<h3>The frontier</h3>")
        parts.append(table(["trial", "compute s", "value"], rows))
    return section("cost", "What it cost", *parts)


def overlapping(rows: Sequence[Importance]) -> dict[str, list[str]]:
    """For each parameter, the others whose intervals overlap its own (cannot be ranked)."""
    return {
        a.name: [b.name for b in rows if b.name != a.name and a.low <= b.high and b.low <= a.high]
        for a in rows
    }


def importance_section(tables: StudyTables, result: ImportanceResult, book: FigureBook) -> str:
    parts = [book.slot("importance", importance_figure(result))]
    if result.rows:
        parts.append(
            para(
                f"Rests on {result.basis}. Importance "
                f"is how strongly a parameter sets the best {TOP_QUANTILE:.0%} of trials "
                f"apart from the rest (PED-ANOVA), as a share of the total; the interval is "
                f"the central {result.level:.0%} of {result.replicates} bootstrap resamples."
            )
        )
        ties = overlapping(result.rows)
        if len(result.rows) > 1 and all(len(v) == len(result.rows) - 1 for v in ties.values()):
            parts.append(para("All intervals overlap: the data cannot rank these parameters."))
        elif not result.ranked:
            parts.append(para(f"Not ranked: {result.note}."))
        rows = [
            [
                r.name,
                num(r.share, 3),
                f"{r.low:.3g} to {r.high:.3g}",
                ("cannot be ranked against " + ", ".join(ties[r.name]))
                if ties[r.name]
                else "ranked: its interval overlaps no other",
            ]
            for r in result.rows
        ]
        parts.append(table(["parameter", "share", "interval", "ranking"], rows))
    if result.fixed:
        parts.append(
            para("Held at one value in every finished trial: " + ", ".join(result.fixed) + ".")
        )
    parts.append("<h3>Score against each parameter</h3>")
    order = {r.name: i for i, r in enumerate(result.rows)}
    panels = sorted(response_figures(tables), key=lambda p: (order.get(p[0], len(order)), p[0]))
    # numbered slots: a parameter's name is the user's text and never becomes an element id
    slots = [book.slot(f"response-{i}", drawn) for i, (_, drawn) in enumerate(panels)]
    parts.append('<div class="panels">' + "".join(slots) + "</div>")
    parts.append(para("Each dot is a finished trial; the best is amber.", "hint"))
    return section("importance", "What mattered", *parts)


def search_section(tables: StudyTables, book: FigureBook) -> str:
    shown, total = stopped_sample(tables)
    caption = "The five leaders in colour, the best in amber; stopped-early trials in grey"
    caption += f" ({len(shown)} of {total} shown)" if total > len(shown) else ""
    caption += "; diverged trials in red; the dashed line is the task's baseline, where it "
    caption += "is on the same scale."
    parts = [
        "<h3>Best so far</h3>",
        book.slot(
            "progress",
            progress_figure(tables),
            "Each finished trial at the compute spent when it ended; the amber step is the "
            "best so far.",
        ),
        "<h3>Coverage of the space</h3>",
        book.slot(
            "coverage",
            coverage_figure(tables),
            "A tick per trial at its value's place in the searched range: gaps are regions "
            "the search never tried; log ranges are placed on a log scale.",
        ),
        "<h3>Curves of the leading trials</h3>",
        book.slot("curves", curves_figure(tables), caption),
        "<h3>Every trial, best first</h3>",
        ranked_table(tables),
    ]
    return section("search", "How the search went", *parts)
