"""Storage URLs: open optuna's RDB storage with our settings, and keep passwords out of text."""

from __future__ import annotations

import os
import random
import re
import socket
import time
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar
from urllib.parse import quote

import optuna
import sqlalchemy as sa

from sweeper.errors import InputError, StorageFailure, StudyNotFound
from sweeper.store.heartbeat import HeartbeatTiming
from sweeper.store.optuna_internals import rdb_storage
from sweeper.store.study_file import check_study_file

T = TypeVar("T")

BUSY_TIMEOUT_SECONDS = 60

_PASSWORD = re.compile(r"(?P<head>://[^:/@]+:)(?P<password>[^@]*)(?P<tail>@)")


def redact(text: str) -> str:
    """Replace the password of every storage URL inside ``text`` with ``***``."""
    return _PASSWORD.sub(lambda m: f"{m['head']}***{m['tail']}", text)


def describe_error(error: BaseException) -> str:
    """A database error as one line, without the password or SQLAlchemy's help link."""
    text = str(getattr(error, "orig", None) or error)
    text = " ".join(text.split())
    return redact(text.split("(Background on this error")[0].strip())


def storage_url(location: str) -> str:
    """Turn a ``.db`` path or a URL into a SQLAlchemy URL."""
    if "://" in location:
        return location
    return f"sqlite:///{Path(location).expanduser().resolve()}"


def is_sqlite(url: str) -> bool:
    return url.startswith("sqlite:")


def sqlite_path(url: str) -> Path | None:
    if not is_sqlite(url):
        return None
    path = url.split(":///", 1)[1] if ":///" in url else ""
    return Path(path) if path and path != ":memory:" else None


def _set_sqlite_pragmas(dbapi_connection: Any, _record: Any) -> None:
    # The driver's own transaction handling is off; _begin_immediate opens every transaction.
    dbapi_connection.isolation_level = None
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute(f"PRAGMA busy_timeout={BUSY_TIMEOUT_SECONDS * 1000}")
    cursor.execute("PRAGMA synchronous=NORMAL")
    cursor.close()


def engine_options(url: str) -> dict[str, Any]:
    if is_sqlite(url):
        return {"connect_args": {"timeout": BUSY_TIMEOUT_SECONDS}}
    # A worker needs a connection for its trial, one for its heartbeat thread and one for
    # its stop watcher: at most three per process, named so pg_stat_activity shows whose.
    name = f"sweeper {socket.gethostname()}:{os.getpid()}"[:63]
    return {
        "pool_pre_ping": True,
        "pool_size": 2,
        "max_overflow": 1,
        "connect_args": {"application_name": name},
    }


def open_storage(
    location: str,
    *,
    create: bool = True,
    heartbeat: bool = True,
    stale_callback: Any = None,
    read_only: bool = False,
) -> optuna.storages.RDBStorage:
    """Open the study database at ``location``; each process must call this itself.

    ``create=False`` refuses a SQLite file that does not exist yet, or that is not a sound
    study. ``read_only=True`` (for commands that only read) opens a SQLite file without ever
    writing to it, so a study on a read-only disk or in a read-only folder can be read.
    Within one process the storage, and so its connection pool, is shared: the coordinator
    and an in-process worker together stay within the pool's three connections.
    """
    url = storage_url(location)
    path = sqlite_path(url)
    # a server's storage is the same for readers: one engine, within the three connections
    key = (os.getpid(), url, read_only and path is not None)
    if key in _OPEN and (path is None or path.exists()):
        return _OPEN[key]
    if path is not None:
        _check_path(path, create=create and not read_only, read_only=read_only)
        if read_only:
            url = _read_only_url(path)
    storage = _open_first_or_join(url, heartbeat and not read_only, stale_callback, read_only)
    _OPEN[key] = storage
    return storage


_OPEN: dict[tuple[int, str, bool], optuna.storages.RDBStorage] = {}


def _check_path(path: Path, *, create: bool, read_only: bool) -> None:
    """One line, exit 2, for a SQLite location that cannot be used as asked."""
    if not path.exists():
        if not create:
            raise StudyNotFound(f"{path}: no study database here; check the path")
        folder = _first_existing(path.parent)
        if not os.access(folder, os.W_OK | os.X_OK):
            raise InputError(
                f"{folder}: no permission to create the study {path.name} here; choose a "
                "writable folder (study.storage or --storage) or change the folder's permissions"
            )
        path.parent.mkdir(parents=True, exist_ok=True)
        return
    check_study_file(path, must_be_study=not create)
    if not read_only and not (os.access(path, os.W_OK) and os.access(path.parent, os.W_OK)):
        raise InputError(
            f"{path}: the study is read-only (no write permission on the file or its folder); "
            "status, report, export and best can still read it, or copy it somewhere writable"
        )


def _first_existing(folder: Path) -> Path:
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    return folder


def _read_only_url(path: Path) -> str:
    # mode=ro never writes; where SQLite cannot even make its shared-memory file beside the
    # database (a read-only folder or disk) and no write-ahead log is pending, immutable=1
    # reads the file as it is
    pending = path.with_name(path.name + "-wal").exists()
    flags = "mode=ro" if pending or os.access(path.parent, os.W_OK) else "mode=ro&immutable=1"
    return f"sqlite:///file:{quote(str(path))}?{flags}&uri=true"


def _open_first_or_join(
    url: str, heartbeat: bool, stale_callback: Any, read_only: bool
) -> optuna.storages.RDBStorage:
    """``_open``, safe against another process creating the same new database right now.

    Two launches on a new file both find no tables and both create them; the slower one
    then fails on a table or schema row the other just wrote. It joins instead: opening
    again finds the tables made.
    """
    attempts = 5
    for attempt in range(attempts):
        try:
            return _open(url, heartbeat, stale_callback, read_only)
        except StorageFailure as error:
            raced = "alembic_version" in str(error) or "already exists" in str(error)
            if not raced or attempt == attempts - 1:
                raise
            time.sleep(0.1 * (attempt + 1))
    raise AssertionError("unreachable")


def _open(
    url: str, heartbeat: bool, stale_callback: Any, read_only: bool
) -> optuna.storages.RDBStorage:
    timing = HeartbeatTiming()  # until the study's own heartbeat is read (set_heartbeat)
    try:
        with warnings.catch_warnings():  # heartbeats are "experimental" in optuna 5
            warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
            storage = optuna.storages.RDBStorage(
                url,
                engine_kwargs=engine_options(url),
                heartbeat_interval=timing.interval if heartbeat else None,
                grace_period=timing.stale_after if heartbeat else None,
                heartbeat_stale_trial_callback=stale_callback,
            )
    except (sa.exc.SQLAlchemyError, ImportError, ValueError) as error:
        message = f"cannot open storage {redact(url)}: {describe_error(error)}"
        raise StorageFailure(message) from None
    if is_sqlite(url) and not read_only:
        sa.event.listen(storage.engine, "connect", _set_sqlite_pragmas)
        sa.event.listen(storage.engine, "begin", _begin_immediate)
        storage.engine.dispose()  # reconnect so that every pooled connection gets the pragmas
    return storage


def _begin_immediate(connection: sa.Connection) -> None:
    # A deferred transaction that reads and then writes fails at once with "database is
    # locked" when another process wrote in between; taking the write lock up front makes
    # SQLite wait on the busy timeout instead.
    connection.exec_driver_sql("BEGIN IMMEDIATE")


def retry_locked(action: Callable[[], T], *, attempts: int = 8) -> T:
    """Run ``action``, retrying with backoff while SQLite reports a locked database."""
    delay = 0.05
    for attempt in range(attempts):
        try:
            return action()
        except sa.exc.OperationalError as error:
            text = str(error).lower()
            if attempt == attempts - 1 or ("locked" not in text and "busy" not in text):
                raise
            time.sleep(delay + random.uniform(0, delay))
            delay = min(delay * 2, 2.0)
    raise AssertionError("unreachable")


def engine_of(study: optuna.Study) -> sa.Engine:
    """The SQLAlchemy engine under a study, shared by our own tables."""
    return rdb_storage(study).engine
