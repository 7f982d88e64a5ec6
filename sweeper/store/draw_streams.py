"""Which draw stream each worker start of a study takes: 0, 1, 2, ... in the order they start.

A counter in ``sweeper_meta``, taken and raised inside one write transaction, so two starts
never share a stream (not after a kill and a quick resume, nor in two launches at once),
while a study run the same way again numbers its starts the same way.
"""

from __future__ import annotations

import hashlib

import sqlalchemy as sa

from sweeper.store.connect import retry_locked
from sweeper.store.tables import META


def _key(study_name: str) -> str:
    # the key column holds 64 characters; a study's name may be longer
    return "draw_stream:" + hashlib.sha1(study_name.encode()).hexdigest()


def next_stream(engine: sa.Engine, study_name: str) -> int:
    """This start's stream number; the next start gets the one after it."""
    key = _key(study_name)

    def take() -> int:
        with engine.begin() as connection:
            found = connection.execute(
                sa.select(META.c.value).where(META.c.key == key).with_for_update()
            ).scalar()
            if found is None:
                connection.execute(sa.insert(META).values(key=key, value="1"))
                return 0
            connection.execute(
                sa.update(META).where(META.c.key == key).values(value=str(int(found) + 1))
            )
            return int(found)

    for attempt in range(5):  # two first starts on a server may both try the insert
        try:
            return retry_locked(take)
        except sa.exc.IntegrityError:
            if attempt == 4:
                raise
    raise AssertionError("unreachable")
