"""Every task kind by name, and ``build_task``: a spec's ``[task]`` table into a ``Task``.

``kind`` picks the family and every other key is an option of that family, except
``model`` and ``model_path``, which name the spec's own network: they belong to no task kind
and are checked with the task by ``sweeper.training.model_plugin.build_task_with_model``.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from sweeper.errors import SpecError
from sweeper.tasks import adding, copy_memory, plugin, reber, recall, sequences, series, text
from sweeper.tasks.base import Task
from sweeper.tasks.options import unknown_key_message
from sweeper.tasks.section import TaskSection, task_section

_BUILDERS: dict[str, Callable[[Mapping[str, Any], Path, str], Task]] = {
    "adding": adding.build,
    "copy": copy_memory.build,
    "recall": recall.build,
    "reber": reber.build,
    "series": series.build,
    "text": text.build,
    "sequences": sequences.build,
    "plugin": plugin.build,
}
TASK_KINDS = tuple(_BUILDERS)


def build_task(table: Mapping[str, Any], base_dir: Path, source: str) -> Task:
    """The task described by ``table`` (a spec's ``[task]`` table).

    Relative data paths resolve against ``base_dir``; errors name ``source`` and the key.
    """
    if "kind" not in table:
        raise SpecError(source, "task.kind", f"required: one of {', '.join(TASK_KINDS)}")
    return build_section_task(task_section(table, source), base_dir, source)


def build_section_task(section: TaskSection, base_dir: Path, source: str) -> Task:
    """The task of a parsed ``[task]`` section; its family checks the options."""
    if section.kind not in _BUILDERS:
        message = unknown_key_message(section.kind, TASK_KINDS, "task kind")
        raise SpecError(source, "task.kind", message)
    return _BUILDERS[section.kind](section.options, base_dir, source)
