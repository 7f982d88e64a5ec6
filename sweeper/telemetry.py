"""Per-epoch training telemetry: the record, gradient-norm statistics and their table."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import sqlalchemy as sa

from sweeper.storage import retry_locked

METADATA = sa.MetaData()

EPOCHS = sa.Table(
    "sweeper_epochs",
    METADATA,
    sa.Column("study_name", sa.String(512), primary_key=True),
    sa.Column("trial_number", sa.Integer, primary_key=True),
    sa.Column("epoch", sa.Integer, primary_key=True),
    sa.Column("train_loss", sa.Float),
    sa.Column("valid_loss", sa.Float),
    sa.Column("valid_metric", sa.Float),
    sa.Column("grad_norm_mean", sa.Float),
    sa.Column("grad_norm_median", sa.Float),
    sa.Column("grad_norm_p95", sa.Float),
    sa.Column("grad_norm_max", sa.Float),
    sa.Column("clip_fraction", sa.Float),
    sa.Column("nonfinite_steps", sa.Integer),
    sa.Column("steps", sa.Integer),
    sa.Column("seconds", sa.Float),
    sa.Column("sequences_per_second", sa.Float),
)


@dataclass(frozen=True)
class GradientStats:
    """Statistics of the pre-clip global gradient norms of one epoch's optimizer steps."""

    mean: float
    median: float
    p95: float
    max: float
    clip_fraction: float  # share of steps whose norm reached the clip threshold
    nonfinite_steps: int
    steps: int


@dataclass(frozen=True)
class EpochRecord:
    """What is recorded after every epoch of every trial (epochs count from 1)."""

    epoch: int
    train_loss: float
    valid_loss: float
    valid_metric: float
    grad_norm_mean: float
    grad_norm_median: float
    grad_norm_p95: float
    grad_norm_max: float
    clip_fraction: float
    nonfinite_steps: int
    steps: int
    seconds: float
    sequences_per_second: float

    def as_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


EPOCH_FIELDS = tuple(field.name for field in dataclasses.fields(EpochRecord))


def summarize_norms(norms: Sequence[float], clip: float) -> GradientStats:
    """Summarise one epoch of pre-clip norms; non-finite norms are counted, not averaged.

    A step counts as clipped when its norm is at or above the threshold (Pascanu et al. 2013,
    Algorithm 1 rescales when ||g|| >= threshold); ``clip = 0`` means clipping is off.
    """
    values = np.asarray(norms, dtype=np.float64)
    finite = values[np.isfinite(values)]
    nonfinite = int(values.size - finite.size)
    if finite.size == 0:
        nan = math.nan
        return GradientStats(nan, nan, nan, nan, 0.0, nonfinite, int(values.size))
    clipped = float(np.mean(finite >= clip)) if clip > 0 else 0.0
    return GradientStats(
        mean=float(finite.mean()),
        median=float(np.median(finite)),
        p95=float(np.percentile(finite, 95)),
        max=float(finite.max()),
        clip_fraction=clipped,
        nonfinite_steps=nonfinite,
        steps=int(values.size),
    )


SCHEMA_VERSION = 1

META = sa.Table(
    "sweeper_meta",
    METADATA,
    sa.Column("key", sa.String(64), primary_key=True),
    sa.Column("value", sa.String(256), nullable=False),
)


def ensure_tables(engine: sa.Engine) -> None:
    """Create our tables beside optuna's and record the schema version they follow."""
    METADATA.create_all(engine, tables=[EPOCHS, META])
    with engine.begin() as connection:
        found = connection.execute(
            sa.select(META.c.value).where(META.c.key == "schema_version")
        ).scalar()
        if found is None:
            connection.execute(
                sa.insert(META).values(key="schema_version", value=str(SCHEMA_VERSION))
            )


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
