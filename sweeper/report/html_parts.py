"""Small HTML building blocks; every piece of text passes through ``esc`` on its way in."""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import plotly.graph_objects as go

from sweeper.report.escape import esc
from sweeper.report.theme import Drawn, Missing


@dataclass(frozen=True)
class Cell:
    """A table cell: shown text, an optional sort key, and an optional CSS class."""

    text: str
    sort: str | None = None
    css: str = ""


def num(value: float, digits: int = 4) -> Cell:
    """A number cell; the script sorts it by its text. NaN shows as a dash and sorts last."""
    if not math.isfinite(value):
        return Cell("–", "", "num")
    return Cell(f"{value:.{digits}g}", None, "num")


def table(
    headers: Sequence[str], rows: Iterable[Sequence[object]], *, sortable: bool = False
) -> str:
    """A table; with ``sortable`` the page's script sorts it by a clicked column."""
    focus = ' tabindex="0"' if sortable else ""
    head = "".join(f'<th scope="col"{focus}>{esc(h)}</th>' for h in headers)
    body = "\n".join("<tr>" + "".join(_cell(c) for c in row) + "</tr>" for row in rows)
    css = ' class="sortable"' if sortable else ""
    return (
        f'<div class="table-wrap"><table{css}><thead><tr>{head}</tr></thead>'
        f"<tbody>\n{body}\n</tbody></table></div>"
    )


def _cell(value: object) -> str:
    cell = value if isinstance(value, Cell) else Cell(str(value))
    sort = f' data-sort="{esc(cell.sort)}"' if cell.sort is not None else ""
    css = f' class="{esc(cell.css)}"' if cell.css else ""
    return f"<td{css}{sort}>{esc(cell.text)}</td>"


def section(anchor: str, title: str, *parts: str) -> str:
    body = "\n".join(p for p in parts if p)
    return f'<section id="{esc(anchor)}">\n<h2>{esc(title)}</h2>\n{body}\n</section>'


def para(text: str, css: str = "") -> str:
    cls = f' class="{esc(css)}"' if css else ""
    return f"<p{cls}>{esc(text)}</p>"


def missing(text: str) -> str:
    """A visible note saying what is absent and why, in place of a figure or table."""
    return para(text, "missing")


def fmt(value: float, digits: int = 4) -> str:
    return f"{value:.{digits}g}" if math.isfinite(value) else "–"


def duration(seconds: float) -> str:
    """Seconds as a short human duration: 42 s, 3 min 20 s, 2 h 05 min, 1 d 03 h."""
    if not math.isfinite(seconds):
        return "–"
    whole = round(seconds)
    if whole < 60:
        return f"{seconds:.3g} s" if seconds < 10 else f"{whole} s"
    minutes, secs = divmod(whole, 60)
    if minutes < 60:
        return f"{minutes} min {secs:02d} s"
    hours, minutes = divmod(minutes, 60)
    if hours < 24:
        return f"{hours} h {minutes:02d} min"
    days, hours = divmod(hours, 24)
    return f"{days} d {hours:02d} h"


class FigureBook:
    """Collects the page's figures; each slot is a placeholder the page's script fills."""

    def __init__(self) -> None:
        self.figures: dict[str, go.Figure] = {}

    def slot(self, key: str, drawn: Drawn, caption: str = "") -> str:
        if isinstance(drawn, Missing):
            return missing(drawn.reason)
        anchor = f"figure-{key}"
        self.figures[anchor] = drawn
        text = f"<figcaption>{esc(caption)}</figcaption>" if caption else ""
        return f'<figure><div class="plot" id="{esc(anchor)}"></div>{text}</figure>'
