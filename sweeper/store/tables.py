"""Our own tables beside the study library's, and the schema version they follow.

Written with SQLAlchemy Core, so SQLite and PostgreSQL share one code path.
"""

from __future__ import annotations

import sqlalchemy as sa

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


CHECKPOINTS = sa.Table(
    "sweeper_checkpoints",
    METADATA,
    sa.Column("study_name", sa.String(512), primary_key=True),
    sa.Column("trial_number", sa.Integer, primary_key=True),
    sa.Column("epoch", sa.Integer, nullable=False),
    sa.Column("payload", sa.LargeBinary, nullable=False),
)


LEASES = sa.Table(
    "sweeper_leases",
    METADATA,
    sa.Column("study_name", sa.String(512), primary_key=True),
    sa.Column("holder", sa.String(256), nullable=False),
    sa.Column("expires", sa.Float, nullable=False),
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
    METADATA.create_all(engine)
    with engine.begin() as connection:
        found = connection.execute(
            sa.select(META.c.value).where(META.c.key == "schema_version")
        ).scalar()
        if found is None:
            connection.execute(
                sa.insert(META).values(key="schema_version", value=str(SCHEMA_VERSION))
            )
