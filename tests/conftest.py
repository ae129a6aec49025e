"""Shared fixtures: a real database per test (a SQLite file, or the PostgreSQL server CI starts)."""

import os
from dataclasses import dataclass
from pathlib import Path

import pytest
from sqlalchemy import Engine, text
from sqlalchemy.orm import Session, sessionmaker

from fleet.db import migrate
from fleet.db.engine import make_engine, make_session_factory
from fleet.services.register import ensure_limit_defaults

DATA = Path(__file__).parent / "data"
# Set by .ci/run for its second pass: the whole suite against a throw-away PostgreSQL server.
SERVER_URL = os.environ.get("FLEET_TEST_DATABASE_URL")


@dataclass
class TestDatabase:
    url: str
    engine: Engine
    sessions: sessionmaker[Session]


def reset_server_schema(engine: Engine) -> None:
    """Leave a server database empty: drop fleet's tables through the migrations, then any leftovers."""
    migrate.downgrade_to_empty(engine)
    with engine.begin() as connection:
        connection.execute(text("DROP TABLE IF EXISTS alembic_version"))


@pytest.fixture
def empty_database_url(tmp_path) -> str:
    """A URL of an empty database: a fresh SQLite file, or the CI PostgreSQL database emptied."""
    if SERVER_URL:
        engine = make_engine(SERVER_URL)
        reset_server_schema(engine)
        engine.dispose()
        return SERVER_URL
    return f"sqlite:///{tmp_path / 'fleet.sqlite'}"


@pytest.fixture
def db(empty_database_url) -> TestDatabase:
    """A migrated database with the default limits stored."""
    engine = make_engine(empty_database_url)
    migrate.upgrade(engine)
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        ensure_limit_defaults(session)
    yield TestDatabase(empty_database_url, engine, sessions)
    engine.dispose()


@pytest.fixture
def cli_env(db, monkeypatch):
    """Environment for invoking the CLI against the test database."""
    monkeypatch.setenv("FLEET_DATABASE_URL", db.url)
    return {"FLEET_DATABASE_URL": db.url}
