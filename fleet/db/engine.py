"""Engine and session factory from one SQLAlchemy URL (FLEET_DATABASE_URL, default a SQLite file here)."""

import os
from pathlib import Path

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.exc import DBAPIError, IntegrityError, OperationalError
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
    # The sqlite3 module would begin transactions itself, lazily, on the first write: a unit that read first
    # then fails at once with "database is locked" when another writer committed meanwhile. SQLAlchemy's
    # "begin" event (_sqlite_begin) emits BEGIN instead, and BEGIN IMMEDIATE for a write unit.
    dbapi_connection.isolation_level = None
    # WAL lets readers carry on while a technician saves; foreign keys are off in SQLite unless asked for.
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cursor.execute("PRAGMA synchronous=NORMAL")
    cursor.close()


# Execution option of a connection that will write: on SQLite it takes the write lock when its transaction begins.
WRITE_OPTION = "fleet_write"


def _sqlite_begin(connection) -> None:
    # A writer queues for the lock here (busy timeout) before it reads anything, so what it reads stays true
    # until it commits; readers begin a plain (deferred) transaction and see one consistent snapshot.
    immediate = connection.get_execution_options().get(WRITE_OPTION)
    connection.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")


def make_engine(url: str | None = None, **kwargs) -> Engine:
    url = database_url(url)
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000}, **kwargs)
        event.listen(engine, "connect", _sqlite_pragmas)
        event.listen(engine, "begin", _sqlite_begin)
        return engine
    return create_engine(url, pool_pre_ping=True, **kwargs)


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    from fleet.db import audit, changes

    audit.install()  # every edit or deletion of an audited row leaves an audit record (idempotent)
    changes.install()  # a write unit notes which rows it changed, for the refresh policy
    return sessionmaker(bind=engine, expire_on_commit=False)


def is_transient(error: BaseException) -> bool:
    """An error that running the same unit of work again can cure: SQLite's lock (its busy timeout ran out, or a
    snapshot went stale), or PostgreSQL's deadlock and serialization failures."""
    if not isinstance(error, OperationalError | DBAPIError):
        return False
    code = getattr(getattr(error, "orig", None), "sqlstate", None)
    return "database is locked" in str(error.orig).lower() or code in ("40001", "40P01")


def is_unique_violation(error: BaseException) -> bool:
    """Two units inserted the same key at once; run again, the later one finds the row and says so."""
    if not isinstance(error, IntegrityError):
        return False
    code = getattr(error.orig, "sqlstate", None)
    return code == "23505" or "unique constraint failed" in str(error.orig).lower()
