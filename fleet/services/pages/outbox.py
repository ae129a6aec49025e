"""The outbox page: mail waiting to go (never tried, or failed and waiting for a retry) and mail sent."""

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from fleet.db.models import OutboxMail, Pump
from fleet.services.mail.settings import mail_on, server_words

SENT_SHOWN = 200  # the newest sent mails; every unsent one is always shown
CSV_COLUMNS = ("id", "kind", "state", "to", "subject", "pump", "created_at", "attempts", "last_error",
               "next_attempt_at", "sent_at")


def _state(mail: OutboxMail) -> str:
    if mail.sent_at is not None:
        return "sent"
    return "failed" if mail.attempts else "pending"


def outbox_page(session: Session) -> dict:
    serial = select(Pump.serial).where(Pump.id == OutboxMail.pump_id).scalar_subquery()
    unsent = session.execute(select(OutboxMail, serial).where(OutboxMail.sent_at.is_(None))
                             .order_by(OutboxMail.id)).all()
    sent = session.execute(select(OutboxMail, serial).where(OutboxMail.sent_at.is_not(None))
                           .order_by(OutboxMail.sent_at.desc(), OutboxMail.id.desc()).limit(SENT_SHOWN)).all()
    mails = [{
        "id": m.id, "kind": m.kind, "state": _state(m), "to": m.to_address, "subject": m.subject, "pump": pump,
        "created_at": m.created_at.isoformat(timespec="seconds"), "attempts": m.attempts, "last_error": m.last_error,
        "next_attempt_at": None if m.sent_at else m.next_attempt_at.isoformat(timespec="seconds"),
        "sent_at": m.sent_at.isoformat(timespec="seconds") if m.sent_at else None,
    } for m, pump in [*unsent, *sent]]
    counts = {state: 0 for state in ("pending", "failed", "sent")}
    for mail in mails:
        if mail["state"] != "sent":
            counts[mail["state"]] += 1
    counts["sent"] = session.scalar(select(func.count()).select_from(OutboxMail)
                                    .where(OutboxMail.sent_at.is_not(None))) or 0
    return {"mail_on": mail_on(), "server": server_words(), "counts": counts, "mails": mails,
            "sent_shown": SENT_SHOWN}
