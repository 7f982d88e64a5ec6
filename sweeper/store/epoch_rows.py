"""Epoch records in the study database: one row per trial and epoch."""

from __future__ import annotations

import math
from typing import Any

import sqlalchemy as sa

from sweeper.store.connect import retry_locked
from sweeper.store.tables import EPOCHS
from sweeper.training.epoch_record import EpochRecord


def _stored(value: Any) -> Any:
    # SQLite and PostgreSQL disagree on NaN and infinity; NULL means "not finite" in our table.
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def write_epoch(engine: sa.Engine, study_name: str, trial_number: int, record: EpochRecord) -> None:
    """Insert or replace one epoch's row (a resumed trial may rewrite its last epoch)."""
    row = {key: _stored(value) for key, value in record.as_dict().items()}
    key = (
        (EPOCHS.c.study_name == study_name)
        & (EPOCHS.c.trial_number == trial_number)
        & (EPOCHS.c.epoch == record.epoch)
    )

    def write() -> None:
        with engine.begin() as connection:
            connection.execute(sa.delete(EPOCHS).where(key))
            connection.execute(
                sa.insert(EPOCHS).values(study_name=study_name, trial_number=trial_number, **row)
            )

    retry_locked(write)


def read_epochs(engine: sa.Engine, study_name: str) -> list[dict[str, Any]]:
    """Every epoch row of a study, ordered by trial and epoch; NULL comes back as NaN."""
    query = (
        sa.select(EPOCHS)
        .where(EPOCHS.c.study_name == study_name)
        .order_by(EPOCHS.c.trial_number, EPOCHS.c.epoch)
    )
    with engine.connect() as connection:
        rows = [dict(row._mapping) for row in connection.execute(query)]
    for row in rows:
        for key, value in row.items():
            if value is None:
                row[key] = math.nan
    return rows
