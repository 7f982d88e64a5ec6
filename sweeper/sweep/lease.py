"""Which process may queue trials: a renewable lease stored in the study database.

Concurrent enqueueing duplicates trials, so exactly one process at a time coordinates a
study (queues trials, fails stale ones). The launcher holds the lease while it runs; a
`sweeper worker` on another host takes it over when the holder stops renewing it.
"""

from __future__ import annotations

import time

import sqlalchemy as sa

from sweeper.store.connect import retry_locked
from sweeper.store.tables import LEASES

LEASE_SECONDS = 30.0


def acquire(
    engine: sa.Engine, study_name: str, holder: str, seconds: float = LEASE_SECONDS
) -> bool:
    """Take or renew the lease; False while another live holder has it."""
    now = time.time()

    def attempt() -> bool:
        with engine.begin() as connection:
            renewed = connection.execute(
                sa.update(LEASES)
                .where(
                    (LEASES.c.study_name == study_name)
                    & ((LEASES.c.holder == holder) | (LEASES.c.expires < now))
                )
                .values(holder=holder, expires=now + seconds)
            ).rowcount
            if renewed:
                return True
            exists = connection.execute(
                sa.select(LEASES.c.holder).where(LEASES.c.study_name == study_name)
            ).first()
            if exists is not None:
                return False
            connection.execute(
                sa.insert(LEASES).values(
                    study_name=study_name, holder=holder, expires=now + seconds
                )
            )
            return True

    try:
        return retry_locked(attempt)
    except sa.exc.IntegrityError:  # another process inserted the row first
        return False


def release(engine: sa.Engine, study_name: str, holder: str) -> None:
    def attempt() -> None:
        with engine.begin() as connection:
            connection.execute(
                sa.delete(LEASES).where(
                    (LEASES.c.study_name == study_name) & (LEASES.c.holder == holder)
                )
            )

    retry_locked(attempt)
