"""Engine and session factory from one SQLAlchemy URL (FLEET_DATABASE_URL, default a SQLite file here)."""

import os
from pathlib import Path

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker

DEFAULT_SQLITE_FILE = "fleet.sqlite"
SQLITE_BUSY_TIMEOUT_MS = 15_000


def database_url(url: str | None = None) -> str:
    """The URL to use: the argument, else FLEET_DATABASE_URL, else a SQLite file in the working directory."""
    if url:
        return url
    env = os.environ.get("FLEET_DATABASE_URL")
    if env:
        return env
    return f"sqlite:///{Path.cwd() / DEFAULT_SQLITE_FILE}"


def _sqlite_pragmas(dbapi_connection, _record) -> None:
    # WAL lets readers carry on while a technician saves; foreign keys are off in SQLite unless asked for.
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cursor.execute("PRAGMA synchronous=NORMAL")
    cursor.close()


def make_engine(url: str | None = None, **kwargs) -> Engine:
    url = database_url(url)
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000}, **kwargs)
        event.listen(engine, "connect", _sqlite_pragmas)
        return engine
    return create_engine(url, pool_pre_ping=True, **kwargs)


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(bind=engine, expire_on_commit=False)
