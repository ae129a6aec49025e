"""Which rows a unit of work changed, noted as the session flushes, for the refresh policy to read.

A write unit starts collecting (``collect``); every row the ORM inserts, updates or deletes in it is noted with
the keys that say where it belongs (its id, pump, reading, machine, position or kind). Bulk inserts that bypass
the ORM note their rows themselves (``note``). Sessions that are not collecting pay nothing.
"""

from dataclasses import dataclass, field
from itertools import chain

from sqlalchemy import event, inspect
from sqlalchemy.orm import Session

_KEY = "fleet_changes"
NOTED_KEYS = ("id", "pump_id", "reading_id", "machine_id", "position_id", "site_id", "oil_id", "kind")


@dataclass
class Changed:
    """table name -> set of (key, value) pairs of the rows changed, e.g. ('reading', {('pump_id', 3), ...})."""

    rows: dict[str, set[tuple[str, object]]] = field(default_factory=dict)

    def add(self, table: str, key: str, value) -> None:
        if value is not None:
            self.rows.setdefault(table, set()).add((key, value))

    def values(self, table: str, key: str) -> set:
        return {value for k, value in self.rows.get(table, ()) if k == key}

    def __bool__(self) -> bool:
        return bool(self.rows)


def collect(session: Session) -> Changed:
    """Start noting what ``session`` changes; returns the collection it fills."""
    changed = Changed()
    session.info[_KEY] = changed
    return changed


def collected(session: Session) -> Changed | None:
    return session.info.get(_KEY)


def note(session: Session, table: str, key: str, values) -> None:
    """Note rows written outside the ORM (bulk inserts): ``values`` of ``key`` in ``table``."""
    changed = collected(session)
    if changed is not None:
        for value in values:
            changed.add(table, key, value)


def _after_flush(session: Session, _context) -> None:
    changed = collected(session)
    if changed is None:
        return
    for obj in chain(session.new, session.dirty, session.deleted):
        if obj in session.dirty and not session.is_modified(obj, include_collections=False):
            continue
        state = inspect(obj)
        table = state.mapper.local_table.name
        for attr in state.mapper.column_attrs:
            if attr.key not in NOTED_KEYS:
                continue
            # The value now and the one it replaced: a row moved from one pump or machine to another changes both.
            changed.add(table, attr.key, state.dict.get(attr.key))
            for value in state.attrs[attr.key].history.deleted or ():
                changed.add(table, attr.key, value)


def install() -> None:
    """Listen on every Session, once (idempotent)."""
    if not event.contains(Session, "after_flush", _after_flush):
        event.listen(Session, "after_flush", _after_flush)
