"""Import ``module:function`` references named in a spec, with an optional search folder."""

from __future__ import annotations

import importlib
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sweeper.errors import SpecError


def import_ref(ref: Any, folder: Path, source: str, key: str) -> Any:
    """The object named by ``ref`` ("module:attribute"), importing the module from ``folder``
    first when it is not already importable."""
    module_name, attribute = split_ref(ref, source, key)
    with on_sys_path(folder):
        try:
            module = importlib.import_module(module_name)
        except Exception as error:  # a plugin can fail in any way; report it, do not crash
            raise SpecError(
                source,
                key,
                f"cannot import {module_name!r} (looked in {folder} and the installed "
                f"packages): {type(error).__name__}: {error}",
            ) from error
    if not hasattr(module, attribute):
        raise SpecError(
            source, key, f"module {module_name!r} has no attribute {attribute!r}; check {ref!r}"
        )
    found = getattr(module, attribute)
    if not callable(found):
        raise SpecError(source, key, f"{ref!r} is a {type(found).__name__}, not a function")
    return found


def split_ref(ref: Any, source: str, key: str) -> tuple[str, str]:
    if isinstance(ref, str) and ref.count(":") == 1:
        module_name, attribute = (part.strip() for part in ref.split(":"))
        if module_name and attribute:
            return module_name, attribute
    raise SpecError(source, key, f"must look like 'module:function', got {ref!r}")


def plugin_folder(path: Any, base_dir: Path, source: str, key: str) -> Path:
    """The folder to import plugins from: ``path`` relative to ``base_dir`` (default: itself)."""
    if not isinstance(path, str):
        raise SpecError(source, key, f"must be a folder path (a string), got {path!r}")
    folder = (base_dir / Path(path).expanduser()).resolve()
    if not folder.is_dir():
        raise SpecError(source, key, f"no folder at {folder}; give it relative to {base_dir}")
    return folder


@contextmanager
def on_sys_path(folder: Path) -> Iterator[None]:
    """Put ``folder`` first on sys.path for the import only, then restore sys.path."""
    entry = str(folder)
    if entry in sys.path:
        yield
        return
    sys.path.insert(0, entry)
    importlib.invalidate_caches()
    try:
        yield
    finally:
        sys.path.remove(entry)
