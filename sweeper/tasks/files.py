"""Data files named by a spec: paths resolve against the spec's folder; text must be UTF-8."""

from __future__ import annotations

from pathlib import Path

from sweeper.errors import SpecError


def resolve(file: str, base_dir: Path, source: str, key: str = "task.file") -> Path:
    """The file at ``file`` (relative to ``base_dir`` unless absolute), which must exist."""
    if not file:
        raise SpecError(source, key, "required: the path of the data file, relative to the spec")
    path = Path(file).expanduser()
    if not path.is_absolute():
        path = base_dir / path
    if not path.is_file():
        raise SpecError(
            source, key, f"no file at {path}; give a path relative to {base_dir} or an absolute one"
        )
    return path


def read_utf8(path: Path, source: str, key: str = "task.file") -> str:
    """The file's text; a byte-order mark is dropped, anything not UTF-8 is refused."""
    raw = path.read_bytes()
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        bad = raw[error.start]
        raise SpecError(
            source,
            key,
            f"{path} is not UTF-8 text (byte 0x{bad:02x} at offset {error.start}); "
            "save it as UTF-8",
        ) from None
