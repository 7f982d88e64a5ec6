"""Storage faults the user can fix, told in one line: a full disk, or a damaged study file.

A full disk surfaces in many forms: SQLite's "database or disk is full" (SQLITE_FULL), an
OSError with ENOSPC from a file write, PostgreSQL's disk_full (SQLSTATE 53100), each often
wrapped by SQLAlchemy and again by optuna ("invalid data in the commit"). ``is_disk_full``
looks through the whole chain.
"""

from __future__ import annotations

import contextlib
import errno
from collections.abc import Callable, Iterator
from pathlib import Path

from sweeper.errors import DiskFull, InputError
from sweeper.store.connect import redact, sqlite_path, storage_url
from sweeper.store.study_file import damage_found

SQLITE_FULL = 13  # the primary result codes in sqlite3.h
SQLITE_CORRUPT, SQLITE_NOTADB = 11, 26
POSTGRES_DISK_FULL = "53100"  # SQLSTATE class 53, insufficient resources
FULL_TEXTS = ("database or disk is full", "no space left on device")


def is_disk_full(error: BaseException) -> bool:
    """Whether ``error``, or any error it was raised from, reports a full disk."""
    return _in_chain(error, _reports_full)


def is_damage(error: BaseException) -> bool:
    """Whether ``error``, or any error it was raised from, reports a damaged database file."""
    return _in_chain(error, _reports_damage)


def _in_chain(error: BaseException, reports: Callable[[BaseException], bool]) -> bool:
    seen: set[int] = set()
    current: BaseException | None = error
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        orig = getattr(current, "orig", None)  # SQLAlchemy keeps the driver's error here
        if reports(current) or (isinstance(orig, BaseException) and reports(orig)):
            return True
        current = current.__cause__ or current.__context__
    return False


def _reports_damage(error: BaseException) -> bool:
    code = getattr(error, "sqlite_errorcode", None)
    if isinstance(code, int) and code & 0xFF in (SQLITE_CORRUPT, SQLITE_NOTADB):
        return True
    return "database disk image is malformed" in str(error).lower()


def _reports_full(error: BaseException) -> bool:
    if isinstance(error, DiskFull):
        return True
    if isinstance(error, OSError) and error.errno == errno.ENOSPC:
        return True
    code = getattr(error, "sqlite_errorcode", None)
    if isinstance(code, int) and code & 0xFF == SQLITE_FULL:  # extended codes keep it low
        return True
    if getattr(error, "pgcode", None) == POSTGRES_DISK_FULL:
        return True
    text = str(error).lower()
    return any(full in text for full in FULL_TEXTS)


def study_disk_full(location: str) -> DiskFull:
    """The one line for a study whose database could not be written for lack of space."""
    path = sqlite_path(storage_url(location))
    where = str(path) if path is not None else redact(location)
    return DiskFull(f"disk full at {where}; free space, then: sweeper resume {redact(location)}")


def page_disk_full(path: Path) -> DiskFull:
    """The one line for a summary or export file that did not fit."""
    return DiskFull(f"disk full at {path}; free space, then write it again")


def study_damaged(location: str) -> InputError:
    """The one line for a study file found damaged while a sweep used it."""
    path = sqlite_path(storage_url(location))
    where = str(path) if path is not None else redact(location)
    found = damage_found(path) if path is not None else ""
    return InputError(
        f"{where}: the study file is damaged ({found or 'the database reported it'}); the "
        "sweep stopped. Restore it from a copy, or run `sqlite3 FILE .recover` into a new file"
    )


@contextlib.contextmanager
def storage_faults_of_study(location: str) -> Iterator[None]:
    """Turn an error caused by a full disk or a damaged file under the study into one line."""
    try:
        yield
    except Exception as error:
        if is_disk_full(error):
            raise study_disk_full(location) from None
        if is_damage(error):
            raise study_damaged(location) from None
        raise
