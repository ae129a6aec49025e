"""Engine and session factory from one SQLAlchemy URL (FLEET_DATABASE_URL, default a SQLite file here)."""

import os
import random
import time
from pathlib import Path

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.exc import OperationalError
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
    from fleet.services import audit

    audit.install()  # every edit or deletion of an audited row leaves an audit record (idempotent)
    return sessionmaker(bind=engine, expire_on_commit=False)


# SQLite answers "database is locked" at once, without waiting out the busy timeout, when a transaction that has
# read must become a writer after another writer committed (WAL snapshot conflict). The only cure is to run the
# whole unit of work again from its start, on a fresh transaction.
LOCK_RETRIES = 8
_LOCK_BACKOFF_S = 0.05


def is_lock_error(error: BaseException) -> bool:
    return isinstance(error, OperationalError) and "database is locked" in str(error.orig).lower()


def run_unit_of_work(sessions: sessionmaker[Session], work, attempts: int = LOCK_RETRIES):
    """Run ``work(session)`` in one transaction and commit; on a SQLite lock error roll back and run it again.

    ``work`` must do everything of the unit itself (it runs again from scratch), and returns its result.
    """
    if attempts < 1:
        raise ValueError("attempts must be at least 1")
    for attempt in range(1, attempts + 1):
        try:
            with sessions.begin() as session:
                return work(session)
        except Exception as error:
            if attempt == attempts or not is_lock_error(error):
                raise
            time.sleep(_LOCK_BACKOFF_S * attempt * (0.5 + random.random()))
