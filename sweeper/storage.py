"""Storage URLs: open optuna's RDB storage with our settings, and keep passwords out of text."""

from __future__ import annotations

import re
import warnings
from pathlib import Path
from typing import Any

import optuna
import sqlalchemy as sa

from sweeper.errors import StorageFailure, StudyNotFound

BUSY_TIMEOUT_SECONDS = 60
HEARTBEAT_SECONDS = 10
GRACE_SECONDS = 30

_PASSWORD = re.compile(r"(?P<head>://[^:/@]+:)(?P<password>[^@]*)(?P<tail>@)")


def redact(text: str) -> str:
    """Replace the password of every storage URL inside ``text`` with ``***``."""
    return _PASSWORD.sub(lambda m: f"{m['head']}***{m['tail']}", text)


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
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute(f"PRAGMA busy_timeout={BUSY_TIMEOUT_SECONDS * 1000}")
    cursor.execute("PRAGMA synchronous=NORMAL")
    cursor.close()


def engine_options(url: str) -> dict[str, Any]:
    if is_sqlite(url):
        return {"connect_args": {"timeout": BUSY_TIMEOUT_SECONDS}}
    return {"pool_pre_ping": True, "pool_size": 2, "max_overflow": 1}


def open_storage(
    location: str,
    *,
    create: bool = True,
    heartbeat: bool = True,
    stale_callback: Any = None,
) -> optuna.storages.RDBStorage:
    """Open the study database at ``location``; each process must call this itself.

    ``create=False`` refuses a SQLite file that does not exist yet (for commands that only read).
    """
    url = storage_url(location)
    path = sqlite_path(url)
    if path is not None:
        if not create and not path.exists():
            raise StudyNotFound(f"{path}: no study database here; check the path")
        path.parent.mkdir(parents=True, exist_ok=True)
    try:
        with warnings.catch_warnings():  # heartbeats are "experimental" in optuna 5
            warnings.simplefilter("ignore", optuna.exceptions.ExperimentalWarning)
            storage = optuna.storages.RDBStorage(
                url,
                engine_kwargs=engine_options(url),
                heartbeat_interval=HEARTBEAT_SECONDS if heartbeat else None,
                grace_period=GRACE_SECONDS if heartbeat else None,
                heartbeat_stale_trial_callback=stale_callback,
            )
    except (sa.exc.SQLAlchemyError, ImportError, ValueError) as error:
        raise StorageFailure(f"cannot open storage {redact(url)}: {redact(str(error))}") from None
    if is_sqlite(url):
        sa.event.listen(storage.engine, "connect", _set_sqlite_pragmas)
        storage.engine.dispose()  # reconnect so that every pooled connection gets the pragmas
    return storage


def engine_of(study: optuna.Study) -> sa.Engine:
    """The SQLAlchemy engine under a study (optuna wraps RDB storage in a cache layer)."""
    storage: Any = study._storage
    storage = getattr(storage, "_backend", storage)
    return storage.engine
