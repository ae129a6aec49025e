"""The trash page: deleted records not yet restored, newest first, named as people know them."""

from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet.db.audit import WHAT, deleted_records
from fleet.db.models import AuditRecord, Machine, Pump

TRASH_COLUMNS = ("id", "what", "record", "deleted_by", "deleted_at", "row_id")


def _describe(record: AuditRecord, serials: dict[int, str], machines: dict[int, str]) -> str:
    """One line naming the deleted row as people know it."""
    values = record.before or {}

    def when(key: str) -> str:
        return (values.get(key) or "")[:16].replace("T", " ")

    if record.table_name == "reading":
        points = len(values.get("flow_points") or [])
        extra = f", with {points} flow-test point(s)" if points else ""
        return f"pump {serials.get(values.get('pump_id'), '?')}, taken {when('taken_at')}{extra}"
    if record.table_name == "maintenance_event":
        return f"pump {serials.get(values.get('pump_id'), '?')}, {values.get('kind')} on {when('date')[:10]}"
    if record.table_name == "oil_sample":
        return f"machine {machines.get(values.get('machine_id'), '?')}, sampled {when('sampled_at')}"
    if record.table_name == "pump":
        return f"pump {values.get('serial')}"
    return f"reading #{values.get('reading_id')}: {values.get('pressure_bar')} bar, {values.get('flow_lpm')} L/min"


def trash_page(session: Session) -> dict:
    """Deleted records not yet restored, newest first: what, who, when."""
    records = deleted_records(session)
    serials = dict(session.execute(select(Pump.id, Pump.serial)).all())
    serials.update({r.row_id: r.before.get("serial") for r in records if r.table_name == "pump" and r.before})
    machines = dict(session.execute(select(Machine.id, Machine.name)).all())
    rows = [{"id": r.id, "what": WHAT.get(r.table_name, r.table_name), "record": _describe(r, serials, machines),
             "deleted_by": r.actor, "deleted_at": r.at.isoformat(sep=" ", timespec="minutes"), "row_id": r.row_id}
            for r in records]
    return {"deleted": rows}
