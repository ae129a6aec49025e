"""Audit trail: every edit or deletion of a reading, event, sample or pump keeps the previous values, who and when.

A ``before_flush`` listener on every Session (``install``) writes an AuditRecord for each UPDATE or DELETE of
the audited models, in the same transaction as the change: the record and the change are stored or lost together.
Who acts is a context variable: the dashboard sets the signed-in user per request; a command-line process is
"cli:<os user>" unless it says otherwise (``acting_as``).

Deleted records are restored from their record with their old ids (``restore``), flow-test points with their
reading. Bulk ``session.execute(update/delete)`` statements bypass the ORM and so this trail; fleet's services
change audited rows only through the ORM.
"""

import contextlib
import contextvars
import getpass
from collections.abc import Iterator
from datetime import datetime
from typing import Any

from sqlalchemy import DateTime, event, inspect, select
from sqlalchemy.orm import Session

from fleet.db.models import AuditRecord, FlowTestPoint, MaintenanceEvent, OilSample, Pump, Reading
from fleet.jsonvalues import json_ready
from fleet.timeutil import utcnow

AUDITED = (Reading, MaintenanceEvent, OilSample, Pump, FlowTestPoint)
MODELS_BY_TABLE = {model.__tablename__: model for model in AUDITED}
# What each table is called on the trash page.
WHAT = {"reading": "reading", "maintenance_event": "maintenance event", "oil_sample": "oil sample",
        "pump": "pump", "flow_test_point": "flow-test point"}

_actor: contextvars.ContextVar[str | None] = contextvars.ContextVar("fleet_actor", default=None)
# Why the records flushed now are changed (a correction must say why); kept in each record of the flush.
_reason: contextvars.ContextVar[str | None] = contextvars.ContextVar("fleet_audit_reason", default=None)


def _os_user() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no login name in some containers
        return "unknown"


def current_actor() -> str:
    """Who is acting now: what was set, else the command-line user of this process."""
    return _actor.get() or f"cli:{_os_user()}"


def set_actor(name: str | None) -> contextvars.Token:
    """Set who acts from now on in this context (a request, a thread); returns a token for ``reset_actor``."""
    return _actor.set(name)


def reset_actor(token: contextvars.Token) -> None:
    _actor.reset(token)


@contextlib.contextmanager
def acting_as(name: str) -> Iterator[None]:
    token = _actor.set(name)
    try:
        yield
    finally:
        _actor.reset(token)


@contextlib.contextmanager
def because(reason: str) -> Iterator[None]:
    """Record ``reason`` with every change flushed inside the block."""
    token = _reason.set(reason)
    try:
        yield
    finally:
        _reason.reset(token)


# --- values as JSON and back -------------------------------------------------------------------------------

def _json_value(value: Any) -> Any:
    return json_ready(value)


def row_values(obj) -> dict[str, Any]:
    """Every column of ``obj`` as stored (committed) before this flush, JSON-ready."""
    state = inspect(obj)
    values, unknown = {}, []
    for attr in state.mapper.column_attrs:
        history = state.attrs[attr.key].history
        if history.deleted:
            values[attr.key] = _json_value(history.deleted[0])
        elif history.unchanged:
            values[attr.key] = _json_value(history.unchanged[0])
        elif history.added:  # set before its stored value was ever loaded: read that from the database
            unknown.append(attr)
        else:
            values[attr.key] = _json_value(getattr(obj, attr.key))
    if unknown and state.session is not None and state.identity is not None:
        model = state.mapper.class_
        with state.session.no_autoflush:
            stored = state.session.execute(
                select(*[getattr(model, attr.key) for attr in unknown]).where(
                    *[column == key for column, key in zip(state.mapper.primary_key, state.identity, strict=True)])
            ).one()
        values.update({attr.key: _json_value(value) for attr, value in zip(unknown, stored, strict=True)})
    return values


def _current_values(obj) -> dict[str, Any]:
    return {attr.key: _json_value(getattr(obj, attr.key)) for attr in inspect(obj).mapper.column_attrs}


def column_values(model, values: dict[str, Any]) -> dict[str, Any]:
    """JSON values back to what the model's columns take (ISO text -> datetime)."""
    columns = inspect(model).columns
    out = {}
    for key, value in values.items():
        if key in columns and isinstance(columns[key].type, DateTime) and isinstance(value, str):
            value = datetime.fromisoformat(value)
        out[key] = value
    return out


# --- the listener ------------------------------------------------------------------------------------------

def _before_flush(session: Session, _flush_context, _instances) -> None:
    now, actor = utcnow(), current_actor()
    deleted_readings = {id(obj) for obj in session.deleted if isinstance(obj, Reading)}
    for obj in list(session.deleted):
        if not isinstance(obj, AUDITED):
            continue
        if isinstance(obj, FlowTestPoint) and id(obj.reading) in deleted_readings:
            continue  # kept inside its reading's record
        before = row_values(obj)
        if isinstance(obj, Reading):
            before["flow_points"] = [_current_values(point) for point in obj.flow_points]
        session.add(AuditRecord(at=now, actor=actor, action="delete", table_name=obj.__tablename__,
                                row_id=before["id"], before=before, after=None))
    for obj in list(session.dirty):
        if not isinstance(obj, AUDITED) or not session.is_modified(obj, include_collections=False):
            continue
        before, after = row_values(obj), _current_values(obj)
        if before == after:
            continue
        session.add(AuditRecord(at=now, actor=actor, action="update", table_name=obj.__tablename__,
                                row_id=before["id"], before=before, after=after, reason=_reason.get()))


def install() -> None:
    """Register the listener on every Session, once (it is idempotent)."""
    if not event.contains(Session, "before_flush", _before_flush):
        event.listen(Session, "before_flush", _before_flush)


# --- the trash: deleted records and their restore ------------------------------------------------------------

class RestoreRefused(Exception):
    """The record cannot be restored (already restored, not a deletion, or its row's place is taken)."""


def deleted_records(session: Session, limit: int = 500) -> list[AuditRecord]:
    """Deletions not yet restored, newest first."""
    return list(session.scalars(
        select(AuditRecord).where(AuditRecord.action == "delete", AuditRecord.restored_at.is_(None))
        .order_by(AuditRecord.at.desc(), AuditRecord.id.desc()).limit(limit)
    ))


def restore(session: Session, record_id: int) -> AuditRecord:
    """Re-insert the row a deletion record holds, with its old id; returns the record. Never commits.

    Raises RestoreRefused when the record is not an unrestored deletion, or the row cannot go back
    (its id or unique key is taken again, or what it belongs to is gone).
    """
    from sqlalchemy.exc import IntegrityError

    record = session.get(AuditRecord, record_id)
    if record is None or record.action != "delete":
        raise RestoreRefused(f"no deleted record #{record_id}")
    if record.restored_at is not None:
        raise RestoreRefused(f"record #{record_id} was already restored on {record.restored_at:%Y-%m-%d %H:%M} "
                             f"by {record.restored_by}")
    model = MODELS_BY_TABLE.get(record.table_name)
    if model is None:
        raise RestoreRefused(f"records of '{record.table_name}' cannot be restored here")
    values = dict(record.before or {})
    points = values.pop("flow_points", []) if model is Reading else []
    row = model(**column_values(model, values))
    try:
        with session.begin_nested():
            session.add(row)
            session.flush()
            for point in points:
                session.add(FlowTestPoint(**column_values(FlowTestPoint, point)))
            session.flush()
    except IntegrityError as error:
        raise RestoreRefused(f"the {WHAT[record.table_name]} cannot go back: a record with the same id or key "
                             f"exists again, or what it belongs to was deleted ({error.orig})") from error
    now, actor = utcnow(), current_actor()
    record.restored_at, record.restored_by = now, actor
    session.add(AuditRecord(at=now, actor=actor, action="restore", table_name=record.table_name,
                            row_id=record.row_id, before=None, after=record.before))
    session.flush()
    return record
