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
MODEL_KEYS = ("model", "model_path")


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
    rest = {key: value for key, value in options.items() if key not in (*MODEL_KEYS, "kind")}
    return _BUILDERS[kind](rest, base_dir, source)
