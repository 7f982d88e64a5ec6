"""A new file beside its destination, for writes that are moved into place once complete."""

from __future__ import annotations

import os
import secrets
from pathlib import Path


def create_beside(path: Path, suffix: str) -> tuple[int, Path]:
    """Create an empty hidden file in ``path``'s folder; return its open descriptor and path.

    Unlike ``tempfile.mkstemp`` (always 0600), the mode is what any new file gets: 0666 less
    the user's umask, so a summary or export is as readable as the user's other files.
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    temporary = path.parent / f".{path.name}.{secrets.token_hex(8)}{suffix}"
    # O_EXCL: never open a file someone else already made under this random name
    handle = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    return handle, temporary
