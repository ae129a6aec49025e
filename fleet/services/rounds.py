"""Rounds: routes (ordered walks of pumps), the quick reading form's checks, and saving one reading.

Every reading goes through the same importer as a CSV file (source "form"), so a form, an upload and the API
accept and refuse exactly the same readings, and is stored as one unit of work (fleet.services.writes).
"""

from dataclasses import dataclass, field
from datetime import UTC, datetime

import numpy as np
import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from fleet import units
from fleet.db.models import Installation, Machine, Position, Pump, Reading, Route, RouteStop, Site
from fleet.db.queries import current_places
from fleet.io.columns import READINGS
from fleet.io.localtime import iso_local, offset_text, to_local
from fleet.io.meter import FAST_ALLOWANCE_FRACTION, FAST_ALLOWANCE_H, meter_doubt
from fleet.io.parse import Problem, parse_table
from fleet.io.rules import FUTURE_TOLERANCE
from fleet.jsonvalues import plain
from fleet.kinds import PUMP_KINDS
from fleet.physics.pump import theoretical_flow_lpm
from fleet.safety import HOT_OIL_CAUTION, OVER_PRESSURE_CAUTION
from fleet.services.analysis.frames import load_pumps
from fleet.services.sitelocal import UTC_CANONICAL, Conventions, of_pump, of_site, pump_sites, row_conventions
from fleet.services.transfer.importing import ImportResult, check_readings, import_table
from fleet.services.writes import Outcome, perform
from fleet.timeutil import utcnow


@dataclass(frozen=True)
class FormField:
    name: str  # the readings CSV column
    quantity: str | None  # a key of units.CHOICES; None for text
    label: str
    required: bool = False
    only_if: str | None = None  # a Pump attribute that must be true for the field to show
    hint: str | None = None  # a line under the field


# The quick form, in walking order of a technician's eyes: hour meter first, then gauges, then meters.
FORM_FIELDS = (
    FormField("hours", "hours", "Running hours", True),
    FormField("outlet_pressure", "pressure", "Outlet pressure", True),
    FormField("speed", "speed", "Shaft speed", True),
    FormField("outlet_flow", "flow", "Outlet flow"),
    FormField("case_drain_flow", "flow", "Case drain flow", only_if="case_drain"),
    FormField("oil_temp", "temperature", "Oil temperature", True),
    FormField("stroke", None, "Displacement setting, %", only_if="variable",
              hint="Without it this reading's flow cannot be judged: it is kept, but left out of the trends."),
)
STROKE_UNIT = "%"
# The round form's other inputs: with FORM_FIELDS, the one place each input's label is written. The form, the
# offline form (from the page's data), the messages and `fleet round` all name a field by these words.
TIME_LABEL = "Local time"
LABELS = {"taken_at": TIME_LABEL, **{f.name: f.label for f in FORM_FIELDS}, "taken_by": "Taken by", "note": "Note"}


def label_of(column: str) -> str | None:
    """The form's label of a problem's column ('outlet_flow [gal/min]' -> 'Outlet flow'); None for a column that
    is no input of the form (the pump, its place)."""
    try:
        name = units.parse_header(column)[0] if column else ""
    except units.UnitError:
        return None
    return LABELS.get(name)


class RouteError(ValueError):
    def __init__(self, problems: list[str]):
        self.problems = problems
        super().__init__("; ".join(problems))


# --- routes ------------------------------------------------------------------------------------------------

def _current_places(session: Session) -> dict[int, dict]:
    return {pump_id: {"site": p.site, "machine": p.machine, "position": p.position}
            for pump_id, p in current_places(session).items()}


def _last_readings(session: Session, pump_ids) -> dict[int, tuple[datetime, float]]:
    latest = (select(Reading.pump_id, func.max(Reading.taken_at).label("at"))
              .where(Reading.pump_id.in_(list(pump_ids))).group_by(Reading.pump_id).subquery())
    rows = session.execute(select(Reading.pump_id, Reading.taken_at, Reading.hours)
                           .join(latest, (latest.c.pump_id == Reading.pump_id) & (latest.c.at == Reading.taken_at)))
    return {pump_id: (at, hours) for pump_id, at, hours in rows}


def route_list(session: Session) -> dict:
    """Stored routes with their stops; when there are none, one suggested route per machine."""
    routes = session.scalars(select(Route).order_by(Route.name)).all()
    places = _current_places(session)
    listed = []
    for route in routes:
        stops = [{"seq": stop.seq, "pump": stop.pump.serial, **places.get(stop.pump_id, {})} for stop in route.stops]
        listed.append({"id": route.id, "name": route.name, "note": route.note, "stops": stops,
                       "pumps": [stop["pump"] for stop in stops]})
    rows = [{"id": r["id"], "name": r["name"], "stops": len(r["stops"]), "pumps": r["pumps"]} for r in listed]
    return {
        "routes": listed,
        "rows": rows,
        "suggested": [] if routes else suggested_routes(session),
        "pumps": list(session.scalars(select(Pump.serial).order_by(Pump.serial))),
    }


def suggested_routes(session: Session) -> list[dict]:
    """One route per machine from the register: its installed pumps in position order."""
    rows = session.execute(
        select(Site.name, Machine.name, Position.name, Pump.serial)
        .select_from(Installation).join(Pump, Pump.id == Installation.pump_id)
        .join(Position, Position.id == Installation.position_id).join(Machine, Machine.id == Position.machine_id)
        .join(Site, Site.id == Machine.site_id).where(Installation.removed_at.is_(None))
        .order_by(Site.name, Machine.name, Position.name)
    ).all()
    routes: dict[tuple[str, str], list[str]] = {}
    for site, machine, _position, serial in rows:
        routes.setdefault((site, machine), []).append(serial)
    return [{"name": f"{site} · {machine}", "pumps": serials} for (site, machine), serials in routes.items()]


def parse_serials(text: str) -> list[str]:
    """Serials typed one per line (or separated by commas), blanks dropped, order kept."""
    return [part.strip() for line in text.splitlines() for part in line.split(",") if part.strip()]


def create_route(session: Session, name: str, serials: list[str], note: str | None = None) -> Route:
    """Store a route walking ``serials`` in that order; RouteError lists every problem, nothing is written."""
    name = (name or "").strip()
    problems = []
    if not name:
        problems.append("give the route a name")
    elif session.scalar(select(Route.id).where(Route.name == name)) is not None:
        problems.append(f"a route named '{name}' already exists")
    if not serials:
        problems.append("list at least one pump")
    seen = set()
    for serial in serials:
        if serial in seen:
            problems.append(f"pump '{serial}' is listed twice")
        seen.add(serial)
    known = dict(session.execute(select(Pump.serial, Pump.id).where(Pump.serial.in_(serials))).all())
    problems += [f"no pump '{s}' in the register" for s in serials if s not in known]
    if problems:
        raise RouteError(problems)
    route = Route(name=name, note=note or None,
                  stops=[RouteStop(pump_id=known[s], seq=i) for i, s in enumerate(serials, start=1)])
    session.add(route)
    session.flush()
    return route


def route_walk(session: Session, route_id: int, now: datetime | None = None) -> dict | None:
    """A route's stops in order, each with what the technician needs at the pump; None if no such route."""
    route = session.get(Route, route_id)
    if route is None:
        return None
    now = now or utcnow()
    places = _current_places(session)
    last = _last_readings(session, [stop.pump_id for stop in route.stops])
    sites = pump_sites(session, [stop.pump.serial for stop in route.stops])
    stops = []
    for number, stop in enumerate(route.stops, start=1):
        pump = stop.pump
        at, hours = last.get(pump.id, (None, None))
        zone_text = of_site(sites.get(pump.serial)).time_zone
        stops.append({
            "number": number, "pump": pump.serial, "kind_label": PUMP_KINDS.get(pump.kind, pump.kind),
            **{k: None for k in ("site", "machine", "position")}, **places.get(pump.id, {}),
            "last_reading_at": iso_local(at, zone_text, "minutes"), "last_hours": hours,
            # 'today' as the site's clocks count it
            "read_today": bool(at and to_local(at, zone_text).date() == to_local(now, zone_text).date()),
        })
    return {"route": {"id": route.id, "name": route.name, "note": route.note}, "stops": stops}


# --- one reading -------------------------------------------------------------------------------------------

def fields_for(pump: Pump) -> list[FormField]:
    return [f for f in FORM_FIELDS if f.only_if is None or getattr(pump, f.only_if)]


def reading_table(serial: str, taken_at: str, values: dict[str, str], chosen_units: dict[str, str],
                  note: str = "", taken_by: str = "") -> pd.DataFrame:
    """One row of text cells whose headers carry the chosen units, e.g. ``outlet_flow [gal/min]``."""
    row = {"pump": serial, "taken_at": (taken_at or "").replace("T", " ")}
    for spec in FORM_FIELDS:
        if spec.name not in values:
            continue
        unit = STROKE_UNIT if spec.name == "stroke" else chosen_units.get(spec.name)
        header = f"{spec.name} [{unit}]" if unit else spec.name
        row[header] = values[spec.name]
    row["note"] = note or ""
    row["taken_by"] = taken_by or ""
    return pd.DataFrame([row], dtype=str)


@dataclass
class PumpFacts:
    """What a reading of one pump is checked against."""

    displacement_cc: float
    rated_pressure_bar: float
    oil_temp_min_c: float
    oil_temp_max_c: float
    last_taken_at: datetime | None
    last_hours: float | None


def pump_facts(session: Session, pump: Pump, before: datetime | None = None) -> PumpFacts:
    """Limits of ``pump`` and its latest reading (before ``before`` when given)."""
    limits = load_pumps(session, [pump.id]).iloc[0]
    statement = select(Reading.taken_at, Reading.hours).where(Reading.pump_id == pump.id)
    if before is not None:
        statement = statement.where(Reading.taken_at < before)
    last = session.execute(statement.order_by(Reading.taken_at.desc()).limit(1)).first()
    return PumpFacts(pump.displacement_cc, pump.rated_pressure_bar, float(limits["oil_temp_min_c"]),
                     float(limits["oil_temp_max_c"]), last[0] if last else None, last[1] if last else None)


@dataclass(frozen=True)
class Doubt:
    code: str
    field: str
    message: str
    caution: str | None = None  # a safety caution shown with the doubt (fleet.safety)


def _in(value: float, quantity: str, unit_text: str | None, digits: int) -> str:
    """A canonical value in the site's unit with that unit, as the technician typed it: '2200.0 psi'."""
    unit_text = unit_text or units.CANONICAL[quantity]
    return f"{float(units.from_canonical([value], quantity, unit_text)[0]):.{digits}f} {units.shown(unit_text)}"


def plausibility_warnings(facts: PumpFacts, reading: dict, now: datetime, site: Conventions = UTC_CANONICAL
                          ) -> list[Doubt]:
    """Readings that can be right but often are a slip of the finger: shown before saving, never refused. Each
    message names its value by the form's label (LABELS; the hour meter's words are fleet.io.meter's, which
    imports share).

    ``reading`` holds canonical values: taken_at, hours, outlet_pressure (bar), speed (rpm), outlet_flow (L/min),
    oil_temp (degC), stroke (fraction; None = full). The messages speak the pump's site's zone and units.
    """
    zone_text = site.time_zone
    warnings = []
    known = {name: not _blank(reading.get(name)) for name in
             ("taken_at", "hours", "outlet_pressure", "speed", "outlet_flow", "oil_temp")}
    stroke = reading.get("stroke")
    flow = reading.get("outlet_flow")
    if known["speed"] and known["outlet_flow"]:
        theoretical = float(theoretical_flow_lpm(facts.displacement_cc, reading["speed"],
                                                 1.0 if _blank(stroke) else stroke))
        if flow > theoretical:
            warnings.append(Doubt("flow_above_theoretical", "outlet_flow",
                                  f"{LABELS['outlet_flow']} {_in(flow, 'flow', site.flow_unit, 1)} is above the "
                                  f"theoretical {_in(theoretical, 'flow', site.flow_unit, 1)} at "
                                  f"{reading['speed']:.0f} rpm: "
                                  "a pump cannot deliver more than its displacement."))
    if known["outlet_pressure"] and reading["outlet_pressure"] > facts.rated_pressure_bar:
        pressure, rated = (_in(v, "pressure", site.pressure_unit, d) for v, d in
                           ((reading["outlet_pressure"], 1), (facts.rated_pressure_bar, 0)))
        warnings.append(Doubt("pressure_above_rated", "outlet_pressure",
                              f"{LABELS['outlet_pressure']} {pressure} is above the rated {rated}.",
                              OVER_PRESSURE_CAUTION))
    temp = reading.get("oil_temp")
    if known["oil_temp"] and not facts.oil_temp_min_c <= temp <= facts.oil_temp_max_c:
        shown_temp, low, high = (_in(v, "temperature", site.temperature_unit, d) for v, d in
                                 ((temp, 1), (facts.oil_temp_min_c, 0), (facts.oil_temp_max_c, 0)))
        warnings.append(Doubt("temperature_outside_limits", "oil_temp",
                              f"{LABELS['oil_temp']} {shown_temp} is outside this pump's limits "
                              f"({low.split()[0]}–{high}).",
                              HOT_OIL_CAUTION if temp > facts.oil_temp_max_c else None))
    if known["hours"] and facts.last_taken_at is not None:
        # Local times on both sides, so the message names the last reading's date as the site's clock had it.
        # Without a usable time only a meter gone backwards can be told (at the last reading's time, no clock).
        last_at = to_local(facts.last_taken_at, zone_text)
        at = to_local(reading["taken_at"], zone_text) if known["taken_at"] else last_at
        meter = meter_doubt(last_at, facts.last_hours, at, reading["hours"])
        if meter and not known["taken_at"] and meter.code != "hours_backwards":
            meter = None
        if meter:
            warnings.append(Doubt(meter.code, "hours", meter.message))
    if known["taken_at"] and reading["taken_at"] > now:
        taken, clock = to_local(reading["taken_at"], zone_text), to_local(now, zone_text)
        warnings.append(Doubt("time_in_future", "taken_at",
                              f"{TIME_LABEL} {taken:%Y-%m-%d %H:%M} is later than now "
                              f"({clock:%Y-%m-%d %H:%M}, UTC{offset_text(clock.utcoffset())})."))
    return warnings


def _blank(value) -> bool:
    return value is None or value is pd.NaT or (isinstance(value, float) and not np.isfinite(value))


@dataclass
class CheckOutcome:
    problems: list[Problem] = field(default_factory=list)  # hard errors: the importer refuses the row
    warnings: list[Doubt] = field(default_factory=list)  # plausibility: the technician may confirm


def check_reading(session: Session, pump: Pump, table: pd.DataFrame, now: datetime | None = None) -> CheckOutcome:
    """The importer's checks of ``table`` (nothing is written) and the plausibility checks of the values that
    passed them: everything the technician should look at, all at once."""
    now = now or utcnow()
    problems = check_readings(session, table, now)
    parsed, _ = parse_table("readings", table, row_conventions(session, "readings", table))
    row = parsed.data.iloc[0]
    refused = {units.parse_header(p.column)[0] for p in problems if p.column}
    reading = {name: None if name in refused else plain(row.get(name)) for name in
               ("taken_at", "hours", "outlet_pressure", "speed", "outlet_flow", "oil_temp", "stroke")}
    facts = pump_facts(session, pump, before=None if _blank(reading["taken_at"]) else reading["taken_at"])
    return CheckOutcome(problems=problems, warnings=plausibility_warnings(facts, reading, now, of_pump(session, pump)))


def save_readings(sessions: sessionmaker[Session], table: pd.DataFrame, source: str = "form",
                  now: datetime | None = None) -> Outcome[ImportResult]:
    """Store readings through the importer as one unit of work (which re-analyses their pumps). Raises
    ImportRejected, with nothing written."""
    return perform(sessions, lambda session: import_table(session, "readings", table, source=source, now=now))


def device_rules(session: Session, route_id: int, now: datetime | None = None) -> dict | None:
    """The checks a device can run on a reading of this route's pumps, as data (for the offline round form).

    Bounds come from the readings columns (fleet.io.columns), unit conversions from fleet.units, the doubts'
    figures from ``pump_facts`` and fleet.physics: the same sources the server's own checks read.
    """
    walk = route_walk(session, route_id, now)
    if walk is None:
        return None
    columns = {column.name: column for column in READINGS}
    fields = {}
    for spec in FORM_FIELDS:
        column = columns[spec.name]
        offered = (STROKE_UNIT,) if spec.name == "stroke" else units.CHOICES[spec.quantity]
        fields[spec.name] = {
            "label": spec.label, "required": column.required, "min": column.min, "max": column.max,
            "positive": column.positive, "canonical_unit": units.SHOWN_LABELS.get(column.quantity or "", ""),
            "units": {unit: units.linear_form(unit, column.quantity) for unit in offered},
            "shown_units": {unit: units.shown(unit) for unit in offered},  # as a screen writes them: °C, not degC
        }
    pumps = {}
    serials = [stop["pump"] for stop in walk["stops"]]
    for pump in session.scalars(select(Pump).where(Pump.serial.in_(serials))):
        facts = pump_facts(session, pump)
        pumps[pump.serial] = {
            # the displacement itself: the device multiplies as theoretical_flow_lpm does, to the same last bit
            "displacement_cc": float(pump.displacement_cc),
            "rated_pressure_bar": facts.rated_pressure_bar,
            "oil_temp_min_c": facts.oil_temp_min_c, "oil_temp_max_c": facts.oil_temp_max_c,
            "last_hours": facts.last_hours,
            "last_taken_at": (facts.last_taken_at.replace(tzinfo=UTC).isoformat(timespec="minutes")
                              if facts.last_taken_at else None),
            "fields": [f.name for f in fields_for(pump)],
        }
    return {"route": walk["route"]["id"], "fields": fields, "pumps": pumps,
            "future_tolerance_s": FUTURE_TOLERANCE.total_seconds(),
            "meter": {"allowance_h": FAST_ALLOWANCE_H, "allowance_fraction": FAST_ALLOWANCE_FRACTION},
            "hot_oil_caution": HOT_OIL_CAUTION, "over_pressure_caution": OVER_PRESSURE_CAUTION,
            "made_at": (now or utcnow()).isoformat(timespec="seconds")}


def unit_choices() -> dict[str, tuple[str, ...]]:
    """Units the form offers per field (canonical first)."""
    return {f.name: units.CHOICES[f.quantity] for f in FORM_FIELDS if f.quantity}


def route_pumps(session: Session, name: str) -> tuple[str, list[str]] | None:
    """(name, serials) of the saved route (by name or id) or the machine named ``name``; None if there is none."""
    routes = session.scalars(select(Route)).all()
    for route in routes:
        if route.name == name or str(route.id) == name:
            return route.name, [stop.pump.serial for stop in route.stops]
    for suggestion in suggested_routes(session):
        if name in (suggestion["name"], suggestion["name"].split(" · ")[-1]):
            return suggestion["name"], suggestion["pumps"]
    return None


def route_names(session: Session) -> list[str]:
    return [r.name for r in session.scalars(select(Route).order_by(Route.name))] + \
        [s["name"] for s in suggested_routes(session)]
