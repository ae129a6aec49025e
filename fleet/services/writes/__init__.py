"""The one unit of work behind every write: validate, write, audit, refresh by one policy, commit.

Every door (a form, the round at a terminal, the readings API, a CSV import, a delete, a restore, the register,
limits, shutdown windows, users and tokens) turns its request into ``perform(sessions, work)``, and its outcome
into a page, JSON or an exit status. ``work(session)`` validates and writes, raising a rejection (nothing is
written) or returning its result. Around it, ``perform``:

1. begins as a writer (SQLite: BEGIN IMMEDIATE, so the unit queues for the lock before reading anything) and
   runs the unit again from its start on a transient lock or a key inserted twice at once (fleet.db.transaction);
2. notes the rows the unit changed (fleet.db.changes); the audit trail is written by the same flush
   (fleet.db.audit);
3. moves on the data version of every pump the refresh policy says the rows feed (policy.py), in the same
   transaction as the rows, then commits;
4. brings the stale analyses of the pumps it touched up to date (fleet.services.analysis.bring_up_to_date),
   computing outside the write lock. Should the process die before that, the versions say which analyses are
   stale, and the next start or read brings them up to date: never silently stale.
5. sends the mail the unit or its refresh queued (an alert when a followed pump got worse, a digest), and any
   left from an earlier failure whose wait is over, after the commit and outside the lock
   (fleet.services.mail.send). A failed send keeps the mail in the outbox and never undoes the write.
"""

from collections.abc import Callable
from dataclasses import dataclass
from typing import Generic, TypeVar

from sqlalchemy.orm import Session, sessionmaker

from fleet.db import changes
from fleet.db.transaction import run_write
from fleet.services.analysis import RefreshSummary, bring_up_to_date
from fleet.services.mail.send import Delivery, deliver_due
from fleet.services.writes.policy import bump_versions, touched_pumps

T = TypeVar("T")


@dataclass
class Outcome(Generic[T]):
    """What a write returned, the pumps it touched, the refresh that followed (None: nothing was stale) and the
    mail sent after it (None: none was due, or mail is off)."""

    value: T
    pumps: set[int]
    refresh: RefreshSummary | None
    mail: Delivery | None = None

    def describe(self) -> str:
        return self.refresh.describe() if self.refresh else "no analysis changed"


def perform(sessions: sessionmaker[Session], work: Callable[[Session], T], *, refresh: bool = True) -> Outcome[T]:
    """Run ``work`` as one unit of work (see the module's text); ``refresh=False`` leaves the stale analyses for
    the next read (a bulk load that analyses the whole fleet itself afterwards)."""
    touched: set[int] = set()

    def unit(session: Session) -> T:
        touched.clear()  # a unit run again starts from nothing
        value = work(session)
        session.flush()
        touched.update(touched_pumps(session, changes.collected(session)))
        bump_versions(session, touched)
        return value

    value = run_write(sessions, unit, prepare=changes.collect)
    summary = bring_up_to_date(sessions, deliver=False, among=touched) if refresh and touched else None
    return Outcome(value, set(touched), summary, deliver_due(sessions))
