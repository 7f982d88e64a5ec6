"""Load a user objective: ``"module:function"`` called as ``function(params, report)``.

``params`` is the trial's parameter dict; ``report(epoch, value)`` passes intermediate values
to the pruner; the return value is the trial's value.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable
from pathlib import Path
from typing import Any

from sweeper.errors import SpecError
from sweeper.tasks.loader import import_ref, plugin_folder

Report = Callable[[int, float], None]
Objective = Callable[[dict[str, Any], Report], float]


def load_objective(ref: str, base_dir: Path, source: str, key: str, path: str = ".") -> Objective:
    """Import the objective named by ``ref``, looking in ``path`` (relative to ``base_dir``)."""
    folder = plugin_folder(path, base_dir, source, key)
    function = import_ref(ref, folder, source, key)
    try:
        signature = inspect.signature(function)
    except (TypeError, ValueError):  # some builtins have no signature; trust them
        return function
    try:
        signature.bind({}, lambda epoch, value: None)
    except TypeError:
        raise SpecError(
            source,
            key,
            f"{ref} must accept two arguments (params, report), its signature is {signature}",
        ) from None
    return function
