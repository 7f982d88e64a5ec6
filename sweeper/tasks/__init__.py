"""Built-in sequence tasks and the plugin loaders.

``build_task`` turns a spec's ``[task]`` table into a ``Task``; ``kind`` picks the family
and every other key is an option of that family, except ``model`` and ``model_path``, which
name the spec's own network (``sweeper.model_plugin``) and are checked here.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

from sweeper.errors import SpecError
from sweeper.tasks import adding, copy_memory, plugin, reber, recall, sequences, series, text
from sweeper.tasks.base import Baseline, SequenceSet, Task
from sweeper.tasks.objective import load_objective
from sweeper.tasks.options import unknown_key_message

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

__all__ = ["TASK_KINDS", "Baseline", "SequenceSet", "Task", "build_task", "load_objective"]


def build_task(options: Mapping[str, Any], base_dir: Path, source: str) -> Task:
    """The task described by ``options`` (a spec's ``[task]`` table).

    Relative data paths resolve against ``base_dir``; errors name ``source`` and the key.
    """
    kind = options.get("kind")
    if kind is None:
        raise SpecError(source, "task.kind", f"required: one of {', '.join(TASK_KINDS)}")
    if not isinstance(kind, str):
        raise SpecError(source, "task.kind", f"must be a string, got {kind!r}")
    if kind not in _BUILDERS:
        raise SpecError(source, "task.kind", unknown_key_message(kind, TASK_KINDS, "task kind"))
    from sweeper.model_plugin import check_model, model_builder, task_options_without_model

    rest = task_options_without_model(options)
    rest.pop("kind")
    builder = model_builder(options, base_dir, source)
    task = _BUILDERS[kind](rest, base_dir, source)
    check_model(builder, task, source)
    return task
