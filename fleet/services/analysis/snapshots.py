"""Keep what each analysis forecast, compactly: the raw material of the forecast record (fleet.services.forecasts).

The rule, applied by the analysis store to every pump it stores: a snapshot is written when the pump's forecast
moved since its latest snapshot, that is when any of these differ: the service interval, whether it has a trend,
whether it is past its limit, the governing limit, the limit date or either bound (dates by the day; hours alone
moving within the same days do not count). A forecast that moves again on the same UTC day replaces that day's
snapshot, so a pump has at most one a day. An analysis computed for a moment before the pump's latest snapshot
writes none. A forecast stands until the next snapshot says otherwise, so an unchanged forecast costs nothing.

For a pump past its limit the snapshot's dates are those of the crossing (crossed_date and its bounds): what the
analysis then said about when the limit was reached.
"""

from datetime import datetime

from sqlalchemy import bindparam, func, insert, select, update
from sqlalchemy.orm import Session

from fleet.db.models import ForecastSnapshot

_IN_CHUNK = 5000  # ids per IN (...) list
FIELDS = ("interval_no", "trend", "past_limit", "governing_limit", "hours_to_limit", "hours_to_limit_low",
          "hours_to_limit_high", "limit_date", "limit_date_low", "limit_date_high")
# The fields whose change makes a new snapshot (the hours follow the dates).
MOVED_WHEN = ("interval_no", "trend", "past_limit", "governing_limit", "limit_date", "limit_date_low",
              "limit_date_high")


def snapshot_values(record: dict) -> dict:
    """A stored analysis record (fleet.trend.engine.results_to_records) as a snapshot's fields."""
    trend = bool(record.get("slip_enough_data") or record.get("drain_enough_data"))
    past = trend and record.get("crossed_date") is not None
    if past:
        return {"interval_no": int(record.get("interval_no") or 0), "trend": True, "past_limit": True,
                "governing_limit": record.get("crossed_limit"), "hours_to_limit": 0.0, "hours_to_limit_low": 0.0,
                "hours_to_limit_high": 0.0, "limit_date": record.get("crossed_date"),
                "limit_date_low": record.get("crossed_date_low"), "limit_date_high": record.get("crossed_date_high")}
    values = {"interval_no": int(record.get("interval_no") or 0), "trend": trend, "past_limit": False}
    values.update({name: record.get(name) if trend else None for name in FIELDS[3:]})
    return values


def _moved(before, after: dict) -> bool:
    return any(getattr(before, name) != after[name] for name in MOVED_WHEN)


def latest_snapshots(session: Session, pump_ids: list[int]) -> dict:
    """pump_id -> its latest snapshot's id, pump, time and the fields the rule compares (MOVED_WHEN), as a row
    (plain columns, not the ORM object: a store asks this of every pump it writes), for the pumps that have one."""
    out = {}
    for first in range(0, len(pump_ids), _IN_CHUNK):
        rows = session.execute(_LATEST, {"ids": pump_ids[first:first + _IN_CHUNK]})
        out.update({row.pump_id: row for row in rows})
    return out


def _latest_statement():
    newest = (select(ForecastSnapshot.pump_id, func.max(ForecastSnapshot.made_at).label("made_at"))
              .where(ForecastSnapshot.pump_id.in_(bindparam("ids", expanding=True)))
              .group_by(ForecastSnapshot.pump_id).subquery())
    return select(ForecastSnapshot.id, ForecastSnapshot.pump_id, ForecastSnapshot.made_at,
                  *(getattr(ForecastSnapshot, name) for name in MOVED_WHEN)).join(
        newest, (newest.c.pump_id == ForecastSnapshot.pump_id) & (newest.c.made_at == ForecastSnapshot.made_at))


_LATEST = _latest_statement()  # built once: building it costs more than running it for a write's pump or two


def keep_forecasts(session: Session, records: list[dict], made_at: datetime) -> int:
    """Write the snapshots the rule asks for (module docstring); returns how many were written or replaced."""
    latest = latest_snapshots(session, [int(r["pump_id"]) for r in records])
    inserts, updates = [], []
    for record in records:
        values = snapshot_values(record)
        before = latest.get(int(record["pump_id"]))
        if before is not None:
            if made_at < before.made_at or not _moved(before, values):
                continue
            if before.made_at.date() == made_at.date():
                updates.append({"id": before.id, "made_at": made_at, **values})
                continue
        inserts.append({"pump_id": int(record["pump_id"]), "made_at": made_at, **values})
    if inserts:
        session.execute(insert(ForecastSnapshot.__table__), inserts)
    if updates:
        session.execute(update(ForecastSnapshot), updates)
    return len(inserts) + len(updates)
