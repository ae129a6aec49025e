"""Correcting a reading: new values with a reason, the old ones kept in the audit trail.

Who may: an engineer, any reading; a technician, a reading they took themselves (its 'taken by' is their user
name) within a day of the time it was taken. The new values pass the importer's own parsing (units, bounds, whole
numbers), so a correction accepts and refuses what a CSV file would. The reading keeps its pump and time: a
reading of the wrong pump or time is deleted and entered again. Run inside a unit of work
(fleet.services.writes.perform): the audit listener keeps the old values with the reason, and the refresh policy
re-analyses the pump.
"""

from dataclasses import dataclass, field
from datetime import datetime, timedelta

import pandas as pd
from sqlalchemy.orm import Session

from fleet import units
from fleet.db import audit
from fleet.db.models import Pump, Reading
from fleet.io.parse import RowConventions, parse_table
from fleet.jsonvalues import plain
from fleet.services import users
from fleet.services.rounds import FORM_FIELDS, plausibility_warnings, pump_facts
from fleet.services.sitelocal import of_pump
from fleet.timeutil import utcnow

# Readings CSV column -> Reading attribute, for the values a correction may change.
CORRECTABLE = {"hours": "hours", "outlet_pressure": "pressure_bar", "speed": "speed_rpm", "outlet_flow": "flow_lpm",
               "case_drain_flow": "drain_lpm", "oil_temp": "temp_c", "stroke": "stroke", "note": "note"}
QUANTITIES = {f.name: f.quantity for f in FORM_FIELDS}
TECHNICIAN_WINDOW = timedelta(days=1)  # how long the technician who took a reading may correct it
MAX_REASON = 500


class CorrectionRefused(ValueError):
    """Nothing was changed. ``problems``: [{"field", "reason"}]; ``status``: 404, 403 or 422."""

    def __init__(self, problems: list[dict], status: int = 422):
        self.problems, self.status = problems, status
        super().__init__("; ".join(f"{p['field'] or 'reading'}: {p['reason']}" if p["field"] else p["reason"]
                                   for p in problems))


@dataclass
class Correction:
    reading_id: int
    pump: str
    changes: list[dict] = field(default_factory=list)  # {"field", "before", "after"} in canonical units
    doubts: list[dict] = field(default_factory=list)  # {"field", "code", "message"}: worth a second look


def may_correct(role: str, name: str, reading: Reading, now: datetime) -> str | None:
    """Why ``name`` (of ``role``) may not correct ``reading`` now, or None when they may."""
    if users.role_at_least(role, "engineer"):
        return None
    if not users.role_at_least(role, "technician"):
        return "a viewer cannot correct readings"
    if (reading.taken_by or "").strip() != name:
        return f"only an engineer, or the technician who took it ({reading.taken_by or 'not recorded'}), may " \
               "correct this reading"
    if now - reading.taken_at > TECHNICIAN_WINDOW:
        taken = f"{reading.taken_at:%Y-%m-%d %H:%M}"
        return f"a technician may correct their reading within a day of taking it ({taken} UTC); ask an engineer"
    return None


def correct_reading(session: Session, reading_id: int, values: dict[str, str], reason: str, by: str,
                    chosen_units: dict[str, str] | None = None, now: datetime | None = None) -> Correction:
    """Give reading ``reading_id`` the ``values`` typed (text cells keyed by readings CSV column, in
    ``chosen_units`` or canonical units; a blank clears an optional value) because of ``reason``, acting as the
    user named ``by``. Raises CorrectionRefused, with nothing changed."""
    now = now or utcnow()
    reading = session.get(Reading, reading_id)
    if reading is None:
        raise CorrectionRefused([{"field": "", "reason": f"no reading #{reading_id}"}], 404)
    user = users.find_user(session, by)
    if user is None or not user.active:
        raise CorrectionRefused([{"field": "", "reason": f"no active user '{by}'"}], 403)
    refusal = may_correct(user.role, user.name, reading, now)
    if refusal:
        raise CorrectionRefused([{"field": "", "reason": refusal}], 403)
    pump = session.get(Pump, reading.pump_id)
    known = {name: value for name, value in values.items() if name in CORRECTABLE}
    parsed, problems = _parse(pump.serial, reading, known, chosen_units or {}, of_pump(session, pump).decimal_comma)
    problems = _shape_problems(values, reason) + problems  # every problem at once
    if problems:
        raise CorrectionRefused(problems)
    changes = []
    for name in known:
        attribute = CORRECTABLE[name]
        before, after = getattr(reading, attribute), parsed[name]
        if before != after:
            changes.append({"field": name, "before": before, "after": after})
    if not changes:
        raise CorrectionRefused([{"field": "", "reason": "the values given are those stored: nothing to correct"}])
    for change in changes:
        setattr(reading, CORRECTABLE[change["field"]], change["after"])
    with audit.because(reason.strip()):
        session.flush()
    return Correction(reading.id, pump.serial, changes, _doubts(session, pump, reading, now))


def _shape_problems(values: dict[str, str], reason: str) -> list[dict]:
    problems = []
    if not (reason or "").strip():
        problems.append({"field": "reason", "reason": "give the reason for the correction (it is kept with the old "
                                                      "values)"})
    elif len(reason) > MAX_REASON:
        problems.append({"field": "reason", "reason": f"at most {MAX_REASON} characters"})
    if not values:
        problems.append({"field": "", "reason": f"name at least one value to correct ({', '.join(CORRECTABLE)})"})
    for name in values:
        if name not in CORRECTABLE:
            problems.append({"field": str(name)[:40], "reason": "not a value a correction may change (one of: "
                             f"{', '.join(CORRECTABLE)}; a reading of the wrong pump or time is deleted and "
                             "entered again)"})
    return problems


def _stored_cell(reading: Reading, name: str) -> tuple[str, str]:
    """(header, text) of a stored value in canonical units, for the parse of the whole corrected row."""
    value = getattr(reading, CORRECTABLE[name])
    if name == "stroke":
        return "stroke [dimensionless]", "" if value is None else repr(value)  # a bare stroke is read in %
    return name, "" if value is None else (value if isinstance(value, str) else repr(value))


def _parse(serial: str, reading: Reading, values: dict[str, str], chosen_units: dict[str, str],
           decimal_comma: bool = False) -> tuple[dict, list[dict]]:
    """The typed values in canonical units, parsed with the rest of the reading (required fields, bounds), and
    the problems of the values typed. Numbers as the pump's site writes them (``decimal_comma``); the stored
    time is UTC, so it is parsed without a zone."""
    row = {"pump": serial, "taken_at": reading.taken_at.isoformat(sep=" ")}
    for name in CORRECTABLE:
        if name in values:
            unit = chosen_units.get(name) if QUANTITIES.get(name) or name == "stroke" else None
            row[f"{name} [{unit}]" if unit else name] = "" if values[name] is None else str(values[name])
        else:
            header, text = _stored_cell(reading, name)
            row[header] = text
    parsed, problems = parse_table("readings", pd.DataFrame([row], dtype=str),
                                   RowConventions(decimal_comma=pd.Series([decimal_comma], dtype=bool)))
    if problems:
        return {}, [{"field": _field_of(p.column), "reason": p.reason} for p in sorted(problems)]
    cells = parsed.data.iloc[0]
    return {name: plain(cells.get(name)) for name in values}, []


def _field_of(column: str) -> str:
    try:
        return units.parse_header(column)[0]
    except units.UnitError:
        return column


def _doubts(session: Session, pump: Pump, reading: Reading, now: datetime) -> list[dict]:
    """The round form's plausibility questions of the corrected values (against the reading before it)."""
    facts = pump_facts(session, pump, before=reading.taken_at)
    values = {"taken_at": reading.taken_at, "hours": reading.hours, "outlet_pressure": reading.pressure_bar,
              "speed": reading.speed_rpm, "outlet_flow": reading.flow_lpm, "oil_temp": reading.temp_c,
              "stroke": reading.stroke}
    return [{"field": d.field, "code": d.code, "message": d.message}
            for d in plausibility_warnings(facts, values, now, of_pump(session, pump))]
