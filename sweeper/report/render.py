"""Assemble the static summary: sections, figures as inline JSON, plotly.js once, our script."""

from __future__ import annotations

import base64
import errno
import hashlib
import os
from importlib import metadata, resources
from pathlib import Path
from string import Template

import plotly.offline

from sweeper.report.collect import StudyTables, read_study
from sweeper.report.escape import esc, script_json
from sweeper.report.html_parts import FigureBook
from sweeper.report.importance import REPLICATES, param_importance
from sweeper.report.new_file import create_beside
from sweeper.report.sections_choice import baselines_of, choice_section, chosen_from_trials
from sweeper.report.sections_gradients import stability_section
from sweeper.report.sections_operations import operations_section
from sweeper.report.sections_search import (
    cost_section,
    importance_section,
    memory_section,
    search_section,
)
from sweeper.report.series_baselines import series_baselines
from sweeper.results.summary_stamp import SummaryStamp, now_utc
from sweeper.store.faults import page_disk_full

# The questions the page answers, in the order a person training recurrent networks asks
# them: (anchor, link text in the navigation).
CONTENTS = (
    ("choice", "What to use"),
    ("stability", "Where it breaks"),
    ("memory", "Memory"),
    ("cost", "Cost"),
    ("importance", "What mattered"),
    ("search", "The search"),
    ("operations", "Operations"),
)


def _version() -> str:
    try:
        return metadata.version("sweeper")
    except metadata.PackageNotFoundError:  # running from a source tree that is not installed
        return "unknown"


VERSION = _version()


def build_report(location: str, output: Path, study_name: str | None = None) -> Path:
    """Write the static HTML summary of a study and return the path written.

    ``location`` is a ``.db`` path or a storage URL. With ``study_name`` None the storage must
    hold exactly one study; otherwise ``StudyNotFound`` or ``InputError`` says what is there.
    """
    tables = read_study(location, study_name)
    return write_page(render_page(tables), Path(output))


def write_page(page: str, output: Path) -> Path:
    """Write atomically, so that a reader never sees half a page; a full disk in one line."""
    try:
        handle, temporary = create_beside(output, ".part")
    except OSError as error:
        if error.errno == errno.ENOSPC:
            raise page_disk_full(output) from None
        raise
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            stream.write(page)
        os.replace(temporary, output)
    except BaseException as error:
        temporary.unlink(missing_ok=True)
        if isinstance(error, OSError) and error.errno == errno.ENOSPC:
            raise page_disk_full(output) from None
        raise
    return output


def render_page(tables: StudyTables, *, replicates: int = REPLICATES, seed: int = 0) -> str:
    """The whole page as one string."""
    stamp = summary_stamp(tables)
    book = FigureBook()
    result = param_importance(tables, replicates=replicates, seed=seed)
    chosen = chosen_from_trials(tables)
    sections = [
        choice_section(tables, chosen, baselines_of(tables) + series_baselines(tables, chosen)),
        stability_section(tables, book),
        memory_section(tables, book),
        cost_section(tables, book),
        importance_section(tables, result, book),
        search_section(tables, book),
        operations_section(tables, book),
    ]
    page_js = _resource("summary.js")
    plotly_js = plotly.offline.get_plotlyjs()
    return Template(_resource("summary.html")).substitute(
        policy=_policy(page_js, plotly_js),
        version=VERSION,
        stamp_meta=stamp.meta_tags(),
        title=esc(f"{tables.summary.name} · sweeper summary"),
        css=_resource("summary.css"),
        heading=esc(tables.summary.name),
        subheading=esc(_subheading(tables)),
        written=esc(stamp.header_line()),
        nav="".join(f'<a href="#{a}">{esc(t)}</a>' for a, t in CONTENTS),
        sections="\n".join(sections),
        footer=esc(f"Written by sweeper {VERSION} on {stamp.written.astimezone():%Y-%m-%d %H:%M}."),
        figure_count=str(len(book.figures)),
        figures=figures_json(book),
        page_js=page_js,
        plotly_js=plotly_js,
    )


def summary_stamp(tables: StudyTables) -> SummaryStamp:
    """When the page is written and how many of the study's trials it shows."""
    finished = sum(trial.finished for trial in tables.trials)
    return SummaryStamp(now_utc(), len(tables.trials), finished)


def figures_json(book: FigureBook) -> str:
    """All figures as one JSON object keyed by element id, safe inside <script>."""
    parts = [f'"{anchor}":{figure.to_json()}' for anchor, figure in book.figures.items()]
    return script_json("{" + ",".join(parts) + "}")


def _policy(*scripts: str) -> str:
    # Only our two scripts may run and nothing may be fetched: the page works from disk.
    hashes = " ".join(f"'sha256-{_digest(s)}'" for s in scripts)
    return (
        f"default-src 'none'; script-src {hashes}; style-src 'unsafe-inline'; "
        "img-src data: blob:; font-src data:; connect-src 'none'; base-uri 'none'; "
        "form-action 'none'"
    )


def _digest(script: str) -> str:
    return base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii")


def _resource(name: str) -> str:
    return resources.files("sweeper.dashboards").joinpath(name).read_text(encoding="utf-8")


def _subheading(tables: StudyTables) -> str:
    s = tables.summary
    better = "lower" if s.direction == "minimize" else "higher"
    goal = f"{s.objective or 'value'}, {better} is better"
    task = f"task {s.task}" if s.task else "no task recorded"
    return f"{goal} · {task} · {len(tables.trials)} trials"
