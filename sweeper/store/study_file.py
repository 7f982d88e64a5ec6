"""Look at a SQLite file before a command that expects a study opens it.

The study library creates its tables in any database it opens, so a command that only reads
would turn a stranger's database into an empty study. Looking first, through a read-only
connection, keeps such a file byte-for-byte as it was and says what is wrong in one line.
"""

from __future__ import annotations

import contextlib
import sqlite3
from pathlib import Path
from urllib.parse import quote

from sweeper.errors import InputError

# tables the study library has in every study database (common practice: a marker table)
STUDY_TABLES = frozenset({"studies", "trials", "alembic_version"})


def check_study_file(path: Path, *, must_be_study: bool = True) -> None:
    """Raise InputError unless ``path`` is a readable, undamaged SQLite study database.

    ``must_be_study=False`` (a command about to create the study) accepts any sound SQLite
    database, among them one that another launch is making into a study right now.
    """
    try:
        with contextlib.closing(_read_only(path)) as connection:
            names = {row[0] for row in connection.execute("SELECT name FROM sqlite_master")}
            if must_be_study and not names >= STUDY_TABLES:
                raise InputError(
                    f"{path}: not a sweeper study (a SQLite database without a study's "
                    "tables); point at the .db file that `sweeper run` made"
                )
            problem = _damage(connection)
    except sqlite3.DatabaseError as error:
        raise InputError(
            f"{path}: not a sweeper study: cannot read it as a database ({error})"
        ) from None
    if problem:
        raise InputError(
            f"{path}: the study file is damaged ({problem}); no trial was started. "
            "Restore it from a copy, or run `sqlite3 FILE .recover` into a new file"
        )


def _read_only(path: Path) -> sqlite3.Connection:
    # mode=ro never creates, writes or journals; a WAL file left beside it is still read
    return sqlite3.connect(f"file:{quote(str(path))}?mode=ro", uri=True)


def _damage(connection: sqlite3.Connection) -> str:
    """What ``PRAGMA quick_check`` found, or an empty string for a sound file."""
    found = [row[0] for row in connection.execute("PRAGMA quick_check(3)")]
    if found == ["ok"]:
        return ""
    text = " ".join(" ".join(found).replace("*** in database main ***", "").split())
    return text or "quick_check failed"


def damage_found(path: Path) -> str:
    """What ``PRAGMA quick_check`` finds wrong with ``path`` (empty when it finds nothing)."""
    try:
        with contextlib.closing(_read_only(path)) as connection:
            return _damage(connection)
    except sqlite3.DatabaseError as error:
        return str(error)
