"""A trial's whole state after its latest epoch, kept in the study database.

One row per trial (keyed by the number of the trial that first ran the configuration, so a
retry finds its original's state); each save replaces the row inside one transaction, so a
process killed mid-write leaves the previous checkpoint intact. Living in the database, a
checkpoint is reachable from any host that can reach the study.
"""

from __future__ import annotations

import io
from typing import Any

import sqlalchemy as sa
import torch

from sweeper.store.connect import retry_locked
from sweeper.store.tables import CHECKPOINTS


def _key(study_name: str, trial_number: int) -> Any:
    return (CHECKPOINTS.c.study_name == study_name) & (CHECKPOINTS.c.trial_number == trial_number)


def encode(state: dict[str, Any]) -> bytes:
    buffer = io.BytesIO()
    torch.save(state, buffer)
    return buffer.getvalue()


def decode(payload: bytes) -> dict[str, Any]:
    # weights_only: a checkpoint is data, never code, even if the database was tampered with
    return torch.load(io.BytesIO(payload), weights_only=True)


def save(
    engine: sa.Engine, study_name: str, trial_number: int, epoch: int, state: dict[str, Any]
) -> None:
    """Replace the trial's checkpoint with ``state`` (taken after ``epoch``), atomically."""
    payload = encode(state)

    def write() -> None:
        with engine.begin() as connection:
            connection.execute(sa.delete(CHECKPOINTS).where(_key(study_name, trial_number)))
            connection.execute(
                sa.insert(CHECKPOINTS).values(
                    study_name=study_name, trial_number=trial_number, epoch=epoch, payload=payload
                )
            )

    retry_locked(write)


def load(engine: sa.Engine, study_name: str, trial_number: int) -> dict[str, Any] | None:
    query = sa.select(CHECKPOINTS.c.payload).where(_key(study_name, trial_number))
    with engine.connect() as connection:
        payload = connection.execute(query).scalar()
    return None if payload is None else decode(payload)


DROP_CHUNK = 500  # numbers per statement: SQLite caps a statement's parameters


def drop(engine: sa.Engine, study_name: str, trial_numbers: list[int]) -> None:
    for start in range(0, len(trial_numbers), DROP_CHUNK):
        chunk = trial_numbers[start : start + DROP_CHUNK]
        query = sa.delete(CHECKPOINTS).where(
            (CHECKPOINTS.c.study_name == study_name) & CHECKPOINTS.c.trial_number.in_(chunk)
        )

        def write(query: sa.Delete = query) -> None:
            with engine.begin() as connection:
                connection.execute(query)

        retry_locked(write)


def stored(engine: sa.Engine, study_name: str) -> dict[int, int]:
    """Trial number -> epoch of every checkpoint the study holds."""
    query = sa.select(CHECKPOINTS.c.trial_number, CHECKPOINTS.c.epoch).where(
        CHECKPOINTS.c.study_name == study_name
    )
    with engine.connect() as connection:
        return {int(number): int(epoch) for number, epoch in connection.execute(query)}
