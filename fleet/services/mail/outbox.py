"""The outbox: every mail is a row first, written in the transaction that decided it, then sent after the commit
(fleet.services.mail.send). So a mail is never lost with a failed send, and never sent for a write that did not
happen; a pump's worsening is one row per follower (a unique key), so it is never queued twice either.

- alerts: the analysis store calls ``queue_alerts`` with the status changes it appends, in its own transaction;
- the weekly digest: ``queue_digest`` in the unit of work of `fleet review --send`;
- ``make_due``: every unsent mail may go at once (the outbox page's retry, `fleet mail send`, `fleet serve`).
"""

from datetime import datetime
from email.utils import make_msgid

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from fleet.db.models import OutboxMail, Pump, StatusChange, User
from fleet.db.queries import current_places
from fleet.kinds import PUMP_KINDS
from fleet.services.mail import compose
from fleet.services.mail.follows import followers
from fleet.services.mail.settings import mail_on, sender
from fleet.timeutil import utcnow
from fleet.trend.status import STATUS_ORDER

# Worst last: healthy < watch < due_soon < past_limit.
SEVERITY = {status: rank for rank, status in enumerate(reversed(STATUS_ORDER))}


def worse(before: str | None, after: str | None) -> bool:
    """True when ``after`` is a worse status than ``before``. A pump's first analysis (no status before) is not
    a worsening: loading a plant's history must not mail everyone about every pump."""
    return before in SEVERITY and after in SEVERITY and SEVERITY[after] > SEVERITY[before]


def _message_id() -> str:
    domain = sender().rpartition("@")[2] or "localhost"
    return make_msgid("fleet", domain=domain)


def _queue(session: Session, kind: str, user: User, mail: tuple[str, str, str], now: datetime,
           pump_id: int | None = None, status_change_id: int | None = None) -> None:
    subject, text, html = mail
    session.add(OutboxMail(kind=kind, user_id=user.id, to_address=user.email, subject=subject[:300], text_body=text,
                           html_body=html, message_id=_message_id(), created_at=now, next_attempt_at=now,
                           attempts=0, pump_id=pump_id, status_change_id=status_change_id))


def queue_alerts(session: Session, changes: list[StatusChange]) -> int:
    """One alert per follower of each pump whose status got worse in ``changes`` (flushed rows); returns how many
    were queued. Nothing when mail is off."""
    worsened = [c for c in changes if worse(c.previous_status, c.status)]
    if not worsened or not mail_on():
        return 0
    pump_ids = {c.pump_id for c in worsened}
    audience = followers(session, pump_ids)
    if not audience:
        return 0
    pumps = {p.id: p for p in session.scalars(select(Pump).where(Pump.id.in_(list(pump_ids))))}
    places = current_places(session, pump_ids)
    queued = 0
    for change in worsened:
        pump, place = pumps[change.pump_id], places.get(change.pump_id)
        words = {
            "pump": pump.serial, "kind_label": PUMP_KINDS.get(pump.kind, pump.kind),
            "place": f"{place.site} / {place.machine} / {place.position}" if place else None,
            "status": change.status, "previous_status": change.previous_status, "reasons": list(change.reasons or []),
            "eta_v_ref": change.eta_v_ref, "hours_to_limit": change.hours_to_limit, "limit_date": change.limit_date,
        }
        for user, follow_words in audience.get(change.pump_id, []):
            _queue(session, "alert", user, compose.alert(words, follow_words), change.at or utcnow(),
                   pump_id=pump.id, status_change_id=change.id)
            queued += 1
    session.flush()
    return queued


def digest_readers(session: Session) -> list[User]:
    """Who gets the weekly review: active users with an address who have not opted out."""
    return list(session.scalars(select(User).where(User.active.is_(True), User.email.is_not(None),
                                                   User.digest.is_(True)).order_by(User.name)))


def queue_digest(session: Session, data: dict, text: str, now: datetime | None = None) -> list[str]:
    """The weekly review (``data`` from weekly_review, ``text`` its plain report) for every digest reader;
    returns their names."""
    now = now or utcnow()
    readers = digest_readers(session)
    mail = compose.digest(data, text)
    for user in readers:
        _queue(session, "digest", user, mail, now)
    session.flush()
    return [user.name for user in readers]


def make_due(session: Session, now: datetime | None = None) -> int:
    """Let every unsent mail go at the next delivery, whatever its wait after a failure; returns how many wait."""
    now = now or utcnow()
    unsent = OutboxMail.sent_at.is_(None)
    session.execute(update(OutboxMail).where(unsent, OutboxMail.next_attempt_at > now).values(next_attempt_at=now)
                    .execution_options(synchronize_session=False))
    return len(session.scalars(select(OutboxMail.id).where(unsent)).all())
