"""What the summary knows about the task from the spec stored in the study."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass

from sweeper.report.collect import StudySummary
from sweeper.tasks.copy_memory import CopyOptions
from sweeper.tasks.recall import RecallOptions

# Tasks whose target depends on an input a known number of steps back, with that option's
# default when the spec leaves it out.
DELAYED = {"recall": RecallOptions, "copy": CopyOptions}


@dataclass(frozen=True)
class Dependency:
    steps: int
    name: str  # the option that sets it, as the spec writes it


def dependency_length(summary: StudySummary) -> Dependency | None:
    """How far back the task's target reaches (the ``delay`` of recall and copy, the
    ``season`` a series spec sets), if known."""
    try:
        task = tomllib.loads(summary.spec_text).get("task", {})
    except tomllib.TOMLDecodeError:
        return None
    season = task.get("season")
    if task.get("kind") == "series" and _steps(season):
        return Dependency(season, "season")
    options = DELAYED.get(str(task.get("kind", "")))
    if options is None:
        return None
    delay = task.get("delay", getattr(options, "delay", None))
    return Dependency(delay, "delay") if _steps(delay) else None


def _steps(value: object) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value >= 1
