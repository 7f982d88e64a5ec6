"""A task made by the user's own factory: ``factory = "module:function"``.

``path`` (default: the spec's folder) is searched for the module first. Every other option is
passed to the factory as a dict, and the factory must return a ``Task``.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from sweeper.errors import SpecError
from sweeper.tasks.base import Task
from sweeper.tasks.loader import import_ref, plugin_folder

OWN_KEYS = ("factory", "path")
REQUIRED = (
    "name",
    "kind",
    "input_size",
    "output_size",
    "length",
    "metric_name",
    "metric_higher_is_better",
)


def build(options: Mapping[str, Any], base_dir: Path, source: str) -> Task:
    if "factory" not in options:
        raise SpecError(source, "task.factory", "required: 'module:function' returning a Task")
    folder = plugin_folder(options.get("path", "."), base_dir, source, "task.path")
    factory = import_ref(options["factory"], folder, source, "task.factory")
    passed = {key: value for key, value in options.items() if key not in OWN_KEYS}
    try:
        task = factory(passed)
    except SpecError:
        raise
    except Exception as error:  # the factory is user code; name it in the message
        raise SpecError(
            source,
            "task.factory",
            f"{options['factory']} raised {type(error).__name__}: {error}",
        ) from error
    return _checked(task, options["factory"], source)


def _checked(task: Any, ref: str, source: str) -> Task:
    if not isinstance(task, Task):
        raise SpecError(
            source,
            "task.factory",
            f"{ref} returned a {type(task).__name__}; it must return a sweeper.tasks.Task",
        )
    missing = [name for name in REQUIRED if not hasattr(task, name)]
    if missing:
        raise SpecError(
            source,
            "task.factory",
            f"the task from {ref} lacks attribute(s) {', '.join(missing)}; set them",
        )
    return task
