"""Transactions that write: take the write lock first, and run again from the start on a transient conflict.

SQLite lets one writer at a time. A unit that begins as a reader and becomes a writer after another writer
committed is refused at once ("database is locked"), however long the busy timeout: its snapshot is stale. So a
write unit begins with BEGIN IMMEDIATE (fleet.db.engine) and queues for the lock before it reads. PostgreSQL lets
writers run side by side; there two units inserting the same key conflict, and a deadlock or serialization
failure can end one of them. Each of these is cured by running the whole unit again on a fresh transaction.
"""

import random
import time
from collections.abc import Callable
from typing import TypeVar

from sqlalchemy.orm import Session, sessionmaker

from fleet.db.engine import WRITE_OPTION, is_transient, is_unique_violation

T = TypeVar("T")

ATTEMPTS = 8
_BACKOFF_S = 0.05


def begin_write(session: Session, exclusive: str | None = None) -> None:
    """Begin the session's transaction as a writer (SQLite: BEGIN IMMEDIATE; elsewhere a plain begin).

    ``exclusive`` names work that must not run twice at once on PostgreSQL either (storing analyses: two units
    replacing the same pump's row would collide); it holds a transaction-level advisory lock of that name.
    """
    connection = session.connection(execution_options={WRITE_OPTION: True})
    if exclusive and connection.dialect.name == "postgresql":
        connection.exec_driver_sql("SELECT pg_advisory_xact_lock(hashtext(%(name)s))", {"name": exclusive})


def run_write(sessions: sessionmaker[Session], work: Callable[[Session], T], attempts: int = ATTEMPTS,
              prepare: Callable[[Session], None] | None = None, exclusive: str | None = None) -> T:
    """Run ``work(session)`` as one write transaction and commit it; return its result.

    ``work`` does everything of the unit itself, since it may run again from scratch. ``prepare`` runs on each
    fresh session before the transaction begins (e.g. to start collecting what the unit changes); ``exclusive``
    as in begin_write. A unit
    that raises anything else rolls back and the error propagates: nothing of it is written.
    """
    if attempts < 1:
        raise ValueError("attempts must be at least 1")
    unique_retried = False
    for attempt in range(1, attempts + 1):
        session = sessions()
        try:
            if prepare is not None:
                prepare(session)
            begin_write(session, exclusive)
            result = work(session)
            session.commit()
            return result
        except Exception as error:
            session.rollback()
            # A key inserted twice at once: one retry lets the unit's own checks find the row and say so.
            retry = is_transient(error) or (is_unique_violation(error) and not unique_retried)
            if attempt == attempts or not retry:
                raise
            unique_retried = unique_retried or is_unique_violation(error)
            time.sleep(_BACKOFF_S * attempt * (0.5 + random.random()))
        finally:
            session.close()
    raise AssertionError("unreachable")  # pragma: no cover
