"""Shared fixtures: small spec files and a command-line runner."""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

import pytest
from click.testing import CliRunner, Result

from sweeper.cli import main

TINY = """
[study]
name = "{name}"
trials = {trials}
workers = {workers}
seed = 3
sampler = "{sampler}"

[confirm]
configurations = 0  # the test counts searched trials

[task]
kind = "adding"
length = 12
train_sequences = 64
valid_sequences = 32

[training]
epochs = {epochs}
batch = 32

[search]
unroll = {{ between = [3, 12] }}
hidden = {{ one_of = [4, 8] }}
clip = {{ between = [0.5, 5.0], scale = "log" }}
lr = {{ between = [0.001, 0.05], scale = "log" }}

[stopping]
rule = "none"  # the tests count trials that ran every epoch
"""


def write_tiny_spec(
    folder: Path,
    name: str = "tiny",
    trials: int = 4,
    workers: int = 1,
    epochs: int = 2,
    sampler: str = "tpe",
    extra: str = "",
) -> Path:
    path = folder / f"{name}.toml"
    text = TINY.format(name=name, trials=trials, workers=workers, epochs=epochs, sampler=sampler)
    path.write_text(text + extra, encoding="utf-8")
    return path


@pytest.fixture
def in_tmp(tmp_path: Path) -> Iterator[Path]:
    """Run the test inside its own folder (the default storage is runs/ under it)."""
    old = Path.cwd()
    os.chdir(tmp_path)
    try:
        yield tmp_path
    finally:
        os.chdir(old)


def invoke(*args: str) -> Result:
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def _postgres_server() -> str:
    url = os.environ.get("SWEEPER_TEST_POSTGRES_URL", "")
    if not url:
        pytest.skip("no PostgreSQL server: set SWEEPER_TEST_POSTGRES_URL (see .ci/postgres.sh)")
    return url


@pytest.fixture
def postgres_url() -> Iterator[str]:
    """A fresh, empty database on the test server, dropped afterwards."""
    import uuid

    import sqlalchemy as sa

    server = _postgres_server()
    name = f"sweeper_{uuid.uuid4().hex[:12]}"
    admin = sa.create_engine(server, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:
        connection.exec_driver_sql(f'CREATE DATABASE "{name}"')
    try:
        yield server.rsplit("/", 1)[0] + f"/{name}"
    finally:
        with admin.connect() as connection:
            connection.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()


@pytest.fixture(params=["sqlite", "postgresql"])
def storage_location(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """Each storage test runs once on a SQLite file and once on a real PostgreSQL server."""
    if request.param == "sqlite":
        return str(tmp_path / "study.db")
    return request.getfixturevalue("postgres_url")
