"""Send what the outbox holds, after the write that queued it and outside the database lock.

1. Claim: in a short write unit, mark the due mails (unsent, their wait over, not being sent by another process)
   with this sender's claim. Two senders never take the same mail; a claim left by a process that died lapses
   after CLAIM_LAPSE.
2. Send: one SMTP connection (STARTTLS and login when the URL says so), one message per mail; no lock is held.
3. Settle: in another write unit, mark each mail sent, or keep it with the error, one more attempt and a wait
   before the next (WAIT_S doubling up to MAX_WAIT_S); `fleet mail send`, the outbox page's retry and
   `fleet serve` make it due at once.

If the process dies between 2 and 3, the claim lapses and the mail goes again: at least once, never lost. Each
mail keeps its Message-ID, so a reader's program can tell a repeat.
"""

import logging
import secrets
import smtplib
import socket
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from email.message import EmailMessage
from email.utils import formatdate

from sqlalchemy import or_, select, update
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session, sessionmaker

from fleet.db.models import OutboxMail
from fleet.db.transaction import run_write
from fleet.services.mail.settings import TIMEOUT_S, MailSettings, MailSettingsError, mail_on, mail_settings
from fleet.timeutil import utcnow

log = logging.getLogger(__name__)
BATCH = 200  # mails per delivery round
CLAIM_LAPSE = timedelta(minutes=15)
WAIT_S, MAX_WAIT_S = 60, 3600


@dataclass
class Delivery:
    """What one delivery round did: mails sent, mails kept for a retry with their errors."""

    sent: int = 0
    failed: int = 0
    errors: list[str] = field(default_factory=list)

    def describe(self) -> str:
        text = f"{self.sent} mail(s) sent"
        if self.failed:
            text += f", {self.failed} kept in the outbox for a retry ({'; '.join(sorted(set(self.errors))[:3])})"
        return text


@dataclass(frozen=True)
class _Mail:
    id: int
    to: str
    subject: str
    text: str
    html: str
    message_id: str


def deliver_due(sessions: sessionmaker[Session], now: datetime | None = None) -> Delivery | None:
    """Send every due mail; None when mail is off or nothing was due.

    Runs after a write has committed, so it never raises for a database that is busy or gone: the write stands,
    the mail stays in the outbox (a claim lapses), and the next delivery takes it."""
    if not mail_on():
        return None
    now = now or utcnow()
    token = secrets.token_hex(16)
    try:
        with sessions() as session:  # a read first: most writes find nothing due and take no lock for it
            if session.scalar(select(OutboxMail.id).where(*_due(now)).limit(1)) is None:
                return None
        mails = run_write(sessions, lambda session: _claim(session, token, now))
    except SQLAlchemyError:
        log.exception("the outbox could not be read; its mail waits for the next delivery")
        return None
    if not mails:
        return None
    try:
        settings = mail_settings()
        results = _send(settings, mails)
    except MailSettingsError as error:
        results = {mail.id: str(error) for mail in mails}
    try:
        run_write(sessions, lambda session: _settle(session, token, results, utcnow()))
    except SQLAlchemyError:
        log.exception("sent mail could not be marked; it goes again once its claim lapses")
    failed = [error for error in results.values() if error]
    return Delivery(len(results) - len(failed), len(failed), failed)


def _due(now: datetime) -> list:
    """Unsent, its wait over, and not being sent by another process (or claimed by one that died)."""
    free = or_(OutboxMail.claim.is_(None), OutboxMail.claimed_at < now - CLAIM_LAPSE)
    return [OutboxMail.sent_at.is_(None), OutboxMail.next_attempt_at <= now, free]


def _claim(session: Session, token: str, now: datetime) -> list[_Mail]:
    due = _due(now)
    ids = session.scalars(select(OutboxMail.id).where(*due).order_by(OutboxMail.id).limit(BATCH)).all()
    if not ids:
        return []
    session.execute(update(OutboxMail).where(OutboxMail.id.in_(ids), *due).values(claim=token, claimed_at=now)
                    .execution_options(synchronize_session=False))
    rows = session.execute(select(OutboxMail.id, OutboxMail.to_address, OutboxMail.subject, OutboxMail.text_body,
                                  OutboxMail.html_body, OutboxMail.message_id)
                           .where(OutboxMail.claim == token).order_by(OutboxMail.id)).all()
    return [_Mail(*row) for row in rows]


def _settle(session: Session, token: str, results: dict[int, str | None], now: datetime) -> None:
    for mail in session.scalars(select(OutboxMail).where(OutboxMail.claim == token)):
        error = results.get(mail.id, "not sent")
        mail.attempts += 1
        mail.claim, mail.claimed_at = None, None
        if error is None:
            mail.sent_at, mail.last_error = now, None
        else:
            mail.last_error = error[:1000]
            mail.next_attempt_at = now + timedelta(seconds=min(WAIT_S * 2 ** (mail.attempts - 1), MAX_WAIT_S))
    session.flush()


def message(settings: MailSettings, mail: _Mail) -> EmailMessage:
    """The mail as sent: plain text and HTML as alternatives of one message."""
    built = EmailMessage()
    built["Subject"] = mail.subject
    built["From"] = settings.sender
    built["To"] = mail.to
    built["Date"] = formatdate(usegmt=True)
    built["Message-ID"] = mail.message_id
    built["Auto-Submitted"] = "auto-generated"  # RFC 3834: no out-of-office replies to a machine
    built.set_content(mail.text)
    built.add_alternative(mail.html, subtype="html")
    return built


def _describe(error: BaseException) -> str:
    return f"{type(error).__name__}: {error}".strip()


def _connect(settings: MailSettings) -> smtplib.SMTP:
    name = socket.gethostname() or "localhost"  # never getfqdn(): no name lookups for a greeting
    if settings.security == "tls":
        smtp = smtplib.SMTP_SSL(settings.host, settings.port, local_hostname=name, timeout=TIMEOUT_S,
                                context=settings.tls_context())
    else:
        smtp = smtplib.SMTP(settings.host, settings.port, local_hostname=name, timeout=TIMEOUT_S)
    try:
        if settings.security == "starttls":
            smtp.starttls(context=settings.tls_context())
        if settings.username:
            smtp.login(settings.username, settings.password or "")
    except BaseException:
        smtp.close()
        raise
    return smtp


def _send(settings: MailSettings, mails: list[_Mail]) -> dict[int, str | None]:
    """mail id -> None (sent) or the error that kept it."""
    results: dict[int, str | None] = {}
    try:
        smtp = _connect(settings)
    except (OSError, smtplib.SMTPException) as error:
        return {mail.id: f"could not reach {settings.host}:{settings.port}: {_describe(error)}" for mail in mails}
    try:
        for mail in mails:
            try:
                smtp.send_message(message(settings, mail))
                results[mail.id] = None
            except (smtplib.SMTPRecipientsRefused, smtplib.SMTPSenderRefused, smtplib.SMTPDataError,
                    smtplib.SMTPNotSupportedError, ValueError) as error:
                results[mail.id] = _describe(error)  # this mail only (refused, or unfit to send); the rest go on
            except (OSError, smtplib.SMTPException) as error:
                for rest in mails:
                    results.setdefault(rest.id, _describe(error))
                break
    finally:
        try:
            smtp.quit()
        except (OSError, smtplib.SMTPException):
            smtp.close()
    return results
