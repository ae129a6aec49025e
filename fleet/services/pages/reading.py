"""One reading's page: its values, the corrections made to it (who, when, old -> new, why) and whether the
person looking may correct it."""

from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet import units
from fleet.db.models import AuditRecord, Pump, Reading
from fleet.jsonvalues import json_ready
from fleet.services.corrections import CORRECTABLE, may_correct
from fleet.services.rounds import FORM_FIELDS, STROKE_UNIT

CORRECTION_COLUMNS = ("at", "by", "field", "before", "after", "reason")
_LABELS = {f.name: f.label for f in FORM_FIELDS} | {"note": "Note"}
_QUANTITIES = {f.name: f.quantity for f in FORM_FIELDS}


def shown_text(reading: Reading, name: str) -> str:
    """A stored value as the correction form shows it: canonical units, full precision (stroke in %)."""
    value = getattr(reading, CORRECTABLE[name])
    if value is None:
        return ""
    if name == "stroke":
        return f"{round(value * 100.0, 9):g}"
    return value if isinstance(value, str) else repr(value)


def reading_page(session: Session, serial: str, reading_id: int, role: str, name: str, now: datetime) -> dict | None:
    """The page's data; None when pump ``serial`` has no reading ``reading_id``."""
    reading = session.get(Reading, reading_id)
    pump = session.get(Pump, reading.pump_id) if reading is not None else None
    if pump is None or pump.serial != serial:
        return None
    fields = []
    for field_name in CORRECTABLE:
        if field_name == "case_drain_flow" and not pump.case_drain and reading.drain_lpm is None:
            continue
        if field_name == "stroke" and not pump.variable and reading.stroke is None:
            continue
        quantity = _QUANTITIES.get(field_name)
        fields.append({"name": field_name, "label": _LABELS[field_name], "value": getattr(reading,
                       CORRECTABLE[field_name]), "text": shown_text(reading, field_name),
                       "unit": STROKE_UNIT if field_name == "stroke" else (units.LABELS[quantity] if quantity else ""),
                       "units": list(units.CHOICES[quantity]) if quantity else []})
    refusal = may_correct(role, name, reading, now)
    return json_ready({
        "pump": serial, "reading_id": reading.id, "taken_at": reading.taken_at.isoformat(sep=" ", timespec="minutes"),
        "taken_by": reading.taken_by, "source": reading.source, "fields": fields,
        "corrections": corrections_of(session, reading.id), "may_correct": refusal is None, "why_not": refusal,
        "labels": _LABELS,
    })


def corrections_of(session: Session, reading_id: int) -> list[dict]:
    """Every correction of the reading, oldest first: one row per value changed."""
    records = session.scalars(select(AuditRecord).where(
        AuditRecord.action == "update", AuditRecord.table_name == "reading", AuditRecord.row_id == reading_id)
        .order_by(AuditRecord.at, AuditRecord.id))
    attribute_to_field = {attribute: field_name for field_name, attribute in CORRECTABLE.items()}
    rows = []
    for record in records:
        before, after = record.before or {}, record.after or {}
        for key in after:
            if key != "id" and before.get(key) != after.get(key):
                rows.append({"at": record.at.isoformat(sep=" ", timespec="minutes"), "by": record.actor,
                             "field": attribute_to_field.get(key, key), "before": before.get(key),
                             "after": after.get(key), "reason": record.reason})
    return rows
