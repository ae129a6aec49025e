"""People who sign in and the API tokens of their loggers: create, set passwords, verify, issue and revoke tokens.

Passwords are hashed with Argon2id (argon2-cffi); only the hash is stored. An API token is a long random string
shown once; only its SHA-256 is stored, which is enough for a secret of 256 random bits and lets a request find
its token by an indexed lookup. Like every service, these functions take a session and never commit.
"""

import hashlib
import re
import secrets
from dataclasses import dataclass
from datetime import datetime, timedelta

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError
from sqlalchemy import bindparam, func, select, update
from sqlalchemy.orm import Session

from fleet.db.models import ApiToken, AuditRecord, User, UserSession
from fleet.kinds import ROLES  # each role can do everything the roles before it can
from fleet.services.mail.addresses import AddressError, check_address
from fleet.timeutil import utcnow

MIN_PASSWORD_LENGTH = 10
SESSION_HOURS = 12  # a shift; a session older than this is over whatever its cookie says
# Wrong passwords for one name: the first few cost nothing, then each attempt waits twice as long as the one
# before, up to a minute. A delay, not a lock-out: no one can shut a colleague out for longer than that.
FREE_FAILURES, MAX_WAIT_S, FAILURE_WINDOW = 3, 60.0, timedelta(minutes=15)
TOKEN_PREFIX = "fleet_"
NAME_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._@-]{0,79}$")

_hasher = PasswordHasher()  # argon2-cffi's defaults follow RFC 9106's low-memory recommendation (Argon2id)
# Verified when a name is unknown, so a wrong name costs as long as a wrong password (no guessing names by time).
_UNKNOWN_USER_HASH = _hasher.hash(secrets.token_hex(16))


class UserError(ValueError):
    """A user or token request that cannot be carried out; the message says why."""


@dataclass(frozen=True)
class IssuedToken:
    """A new API token: ``secret`` is shown to the person once and never stored."""

    id: int
    user: str
    label: str
    secret: str


def role_at_least(role: str, needed: str) -> bool:
    """True when ``role`` may do what ``needed`` may (engineer > technician > viewer)."""
    if role not in ROLES or needed not in ROLES:
        return False
    return ROLES.index(role) >= ROLES.index(needed)


def active_user(session: Session, user_id: int) -> User | None:
    """The user with this id while the account is active, else None."""
    user = session.get(User, user_id)
    return user if user is not None and user.active else None


def find_user(session: Session, name: str) -> User | None:
    return session.scalar(select(User).where(User.name == name))


def _check_password(password: str) -> None:
    if len(password) < MIN_PASSWORD_LENGTH:
        raise UserError(f"the password must have at least {MIN_PASSWORD_LENGTH} characters")


def create_user(session: Session, name: str, role: str, password: str, email: str | None = None) -> User:
    """A new active user with ``password`` hashed (and a mail address, if given)."""
    name = name.strip()
    if not NAME_PATTERN.match(name):
        raise UserError("a user name is 1 to 80 letters, digits or . _ @ -, starting with a letter or digit")
    if role not in ROLES:
        raise UserError(f"unknown role '{role}' (roles: {', '.join(ROLES)})")
    if find_user(session, name) is not None:
        raise UserError(f"there is already a user '{name}'")
    _check_password(password)
    address = _address(email) if email else None
    user = User(name=name, role=role, password_hash=_hasher.hash(password), active=True, created_at=utcnow(),
                email=address)
    session.add(user)
    session.flush()
    return user


def set_password(session: Session, name: str, password: str) -> User:
    """A new password; every session signed in with the old one ends."""
    user = find_user(session, name)
    if user is None:
        raise UserError(f"no user '{name}'")
    _check_password(password)
    user.password_hash = _hasher.hash(password)
    end_sessions(session, user.id)
    session.flush()
    return user


def set_active(session: Session, name: str, active: bool) -> User:
    """Enable or disable a user; disabling ends their sessions, and their API tokens stop working."""
    user = find_user(session, name)
    if user is None:
        raise UserError(f"no user '{name}'")
    user.active = active
    if not active:
        end_sessions(session, user.id)
    session.flush()
    return user


def _address(email: str | None) -> str | None:
    """A checked address, or None for a blank one (no mail)."""
    if email is None or not email.strip():
        return None
    try:
        return check_address(email)
    except AddressError as error:
        raise UserError(str(error)) from error


def set_email(session: Session, name: str, email: str | None) -> User:
    """Give NAME a mail address for alerts and the weekly digest; a blank address removes it."""
    user = find_user(session, name)
    if user is None:
        raise UserError(f"no user '{name}'")
    user.email = _address(email)
    session.flush()
    return user


def update_account(session: Session, user_id: int, email: str | None, digest: bool) -> User:
    """What a user sets on their own page: their address (blank: none) and whether the weekly digest comes."""
    user = active_user(session, user_id)
    if user is None:
        raise UserError("no such active user")
    user.email, user.digest = _address(email), bool(digest)
    session.flush()
    return user


# --- sessions ------------------------------------------------------------------------------------------------

def start_session(session: Session, user_id: int) -> str:
    """A new signed-in session of the user; returns its key, which only the browser's cookie keeps."""
    key = secrets.token_urlsafe(32)
    session.add(UserSession(user_id=user_id, key_hash=token_hash(key), started_at=utcnow()))
    session.flush()
    return key


def session_user(session: Session, user_id: int, key: str, now: datetime | None = None) -> User | None:
    """The active user whose live session ``key`` is, else None (ended, expired, another user's, or unknown)."""
    now = now or utcnow()
    row = session.execute(select(UserSession, User).join(User, User.id == UserSession.user_id)
                          .where(UserSession.key_hash == token_hash(key))).first()
    if row is None:
        return None
    stay, user = row
    if stay.user_id != user_id or stay.ended_at is not None or not user.active or \
            stay.started_at < now - timedelta(hours=SESSION_HOURS):
        return None
    return user


def end_session(session: Session, key: str) -> None:
    session.execute(update(UserSession).where(UserSession.key_hash == token_hash(key),
                                              UserSession.ended_at.is_(None)).values(ended_at=utcnow()))


def end_sessions(session: Session, user_id: int) -> None:
    session.execute(update(UserSession).where(UserSession.user_id == user_id, UserSession.ended_at.is_(None))
                    .values(ended_at=utcnow()))


# --- failed sign-ins -----------------------------------------------------------------------------------------

FAILED = "sign_in_failed"


def record_failure(session: Session, name: str, address: str | None) -> None:
    """Keep a failed sign-in in the audit trail: the name tried, from where (never the password)."""
    user = find_user(session, name)
    session.add(AuditRecord(at=utcnow(), actor=f"sign-in from {address or 'unknown address'}"[:120], action=FAILED,
                            table_name=User.__tablename__, row_id=user.id if user else 0, before=None,
                            after={"name": name[:80]}))
    session.flush()


def sign_in_wait_s(session: Session, name: str, now: datetime | None = None) -> float:
    """Seconds before the next sign-in attempt for ``name`` may be tried (0: now).

    Counts the failures for the name in the last quarter hour since its last successful sign-in."""
    now = now or utcnow()
    since = now - FAILURE_WINDOW
    user = find_user(session, name)
    if user is not None and user.last_login_at is not None:
        since = max(since, user.last_login_at)
    failures = session.execute(
        select(func.count(), func.max(AuditRecord.at)).where(
            AuditRecord.action == FAILED, AuditRecord.table_name == User.__tablename__,
            AuditRecord.after["name"].as_string() == name[:80], AuditRecord.at > since)).one()
    count, last = failures
    if count < FREE_FAILURES or last is None:
        return 0.0
    wait = min(2.0 ** (count - FREE_FAILURES + 1), MAX_WAIT_S)
    return max(0.0, wait - (now - last).total_seconds())


def verify_password(session: Session, name: str, password: str) -> User | None:
    """The active user when ``password`` is theirs, else None. Reads only (record_sign_in writes)."""
    user = find_user(session, name)
    stored = user.password_hash if user is not None else _UNKNOWN_USER_HASH
    try:
        _hasher.verify(stored, password)
    except (VerificationError, InvalidHashError):
        return None
    if user is None or not user.active:
        return None
    return user


def record_sign_in(session: Session, user_id: int, password: str) -> User:
    """Note the sign-in, and hash the password again where the hash's cost settings are out of date."""
    user = session.get(User, user_id)
    if _hasher.check_needs_rehash(user.password_hash):
        user.password_hash = _hasher.hash(password)
    user.last_login_at = utcnow()
    session.flush()
    return user


def list_users(session: Session) -> list[dict]:
    """Every user with role, state and how many live tokens they hold; never a hash."""
    users = session.scalars(select(User).order_by(User.name)).all()
    live = dict(session.execute(select(ApiToken.user_id, func.count()).where(ApiToken.revoked_at.is_(None))
                                .group_by(ApiToken.user_id)).all())
    return [{"name": u.name, "role": u.role, "active": u.active, "created_at": u.created_at,
             "last_login_at": u.last_login_at, "tokens": live.get(u.id, 0), "email": u.email, "digest": u.digest}
            for u in users]


# --- API tokens --------------------------------------------------------------------------------------------

def token_hash(secret: str) -> str:
    return hashlib.sha256(secret.encode("utf-8")).hexdigest()


def create_token(session: Session, name: str, label: str) -> IssuedToken:
    """A new token for user ``name``; the returned secret is the only copy."""
    user = find_user(session, name)
    if user is None:
        raise UserError(f"no user '{name}'")
    label = label.strip()
    if not label or len(label) > 120:
        raise UserError("give the token a label of 1 to 120 characters (what or who uses it)")
    secret = TOKEN_PREFIX + secrets.token_urlsafe(32)
    token = ApiToken(user_id=user.id, name=label, token_hash=token_hash(secret), created_at=utcnow())
    session.add(token)
    session.flush()
    return IssuedToken(token.id, user.name, label, secret)


def revoke_token(session: Session, token_id: int) -> ApiToken:
    token = session.get(ApiToken, token_id)
    if token is None:
        raise UserError(f"no API token with id {token_id}")
    if token.revoked_at is None:
        token.revoked_at = utcnow()
        session.flush()
    return token


# Built once: every API request asks it.
_TOKEN_OWNER = (select(User, ApiToken).join(ApiToken, ApiToken.user_id == User.id)
                .where(ApiToken.token_hash == bindparam("token_hash")))


def user_for_token(session: Session, secret: str) -> tuple[User, ApiToken] | None:
    """The active user and live token that ``secret`` belongs to, else None (unknown, revoked, user disabled)."""
    if not secret.startswith(TOKEN_PREFIX):
        return None
    row = session.execute(_TOKEN_OWNER, {"token_hash": token_hash(secret)}).first()
    if row is None:
        return None
    user, token = row
    if token.revoked_at is not None or not user.active:
        return None
    return user, token


# One statement in the caller's write, with no load and flush of the token's row (every API write runs it).
_MARK_USED = (update(ApiToken).where(ApiToken.id == bindparam("token_id")).values(last_used_at=bindparam("at"))
              .execution_options(synchronize_session=False))


def mark_token_used(session: Session, token_id: int) -> None:
    session.execute(_MARK_USED, {"token_id": token_id, "at": utcnow()})


def list_tokens(session: Session) -> list[dict]:
    """Every API token (id, owner, label, dates), newest first; the secrets are not stored, so never shown."""
    rows = session.execute(select(ApiToken, User.name).join(User, User.id == ApiToken.user_id)
                           .order_by(ApiToken.id.desc()))
    return [{"id": t.id, "user": name, "label": t.name, "created_at": t.created_at, "last_used_at": t.last_used_at,
             "revoked_at": t.revoked_at} for t, name in rows]
