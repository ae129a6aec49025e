"""The register's forms: what each asks, what it shows when editing, and how it saves.

Kinds the importer knows (sites, pumps, installations, events, samples) are saved through
fleet.services.transfer.importing.import_table, so the checks are the CLI's; the rest (machines, positions, oils, limit
defaults, removals) are checked here. Savers run inside a unit of work (fleet.services.writes.perform), which
commits and re-analyses what the refresh policy says the write touched.
"""

from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet import units
from fleet.db.models import LimitDefault, Machine, Oil, Position, Pump, Site
from fleet.db.queries import current_installations
from fleet.io import rules
from fleet.io.localtime import form_value
from fleet.io.parse import ImportRejected
from fleet.kinds import EVENT_KINDS, FAILURE_MODES, PUMP_KINDS
from fleet.services import sitelocal
from fleet.services.register import records as register
from fleet.services.transfer.importing import import_table
from fleet.services.writes.forms import Collector, Field, FormRejected, one_row_table, problems_by_field
from fleet.timeutil import utcnow


@dataclass
class Saved:
    message: str


@dataclass(frozen=True)
class RegisterForm:
    title: str
    fields: Callable[[Session, str | None], list[Field]]
    initial: Callable[[Session, str | None], dict]
    save: Callable[[Session, str | None, dict], Saved]
    modes: frozenset = frozenset({"new", "edit"})  # "edit": of an existing record, named by the key


class NotFound(LookupError):
    """The record a form edits does not exist."""


# --- choices ---------------------------------------------------------------------------------------------------

def _site_options(session: Session) -> tuple:
    return tuple((str(i), n) for i, n in session.execute(select(Site.id, Site.name).order_by(Site.name)))


def _machine_options(session: Session) -> tuple:
    rows = session.execute(select(Machine.id, Site.name, Machine.name).join(Site, Site.id == Machine.site_id)
                           .order_by(Site.name, Machine.name))
    return tuple((str(i), f"{s} / {m}") for i, s, m in rows)


def _position_options(session: Session) -> tuple:
    rows = session.execute(select(Position.id, Site.name, Machine.name, Position.name)
                           .join(Machine, Machine.id == Position.machine_id).join(Site, Site.id == Machine.site_id)
                           .order_by(Site.name, Machine.name, Position.name))
    return tuple((str(i), f"{s} / {m} / {p}") for i, s, m, p in rows)


def _oil_options(session: Session) -> tuple:
    return (("", "none yet"),) + tuple(
        (str(i), n) for i, n in session.execute(select(Oil.id, Oil.name).order_by(Oil.name)))


def _pump_options(session: Session, installed_only: bool = False) -> tuple:
    statement = select(Pump.serial, Pump.kind).order_by(Pump.serial)
    if installed_only:
        statement = statement.where(Pump.id.in_(current_installations()))
    return tuple((s, f"{s} ({PUMP_KINDS.get(k, k)})") for s, k in session.execute(statement))


def _kind_options() -> tuple:
    return tuple(PUMP_KINDS.items())


def _get(session: Session, model, key):
    try:
        row = session.get(model, int(key))
    except (TypeError, ValueError):
        row = None
    if row is None:
        raise NotFound(f"no {model.__tablename__.replace('_', ' ')} {key}")
    return row


def _fmt(value) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else ""
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, datetime):
        return value.strftime("%Y-%m-%dT%H:%M")
    return str(value)


def _import_one(session: Session, kind: str, values: dict, columns: list[str], quantities: dict | None = None):
    try:
        return import_table(session, kind, one_row_table(values, columns, quantities), source="form")
    except ImportRejected as rejected:
        raise problems_by_field(rejected) from None


# --- sites -----------------------------------------------------------------------------------------------------

def _site_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("site", "Site name", required=True, readonly=key is not None),
        Field("currency", "Currency", help="code used for costs, e.g. EUR"),
        Field("tariff_per_kwh", "Electricity price per kWh", "number", help="in the site currency"),
        Field("motor_efficiency", "Drive motor efficiency", "number", help="fraction, e.g. 0.93"),
        Field("note", "Note", "textarea"),
        Field("time_zone", "Time zone",
              help="IANA name of the site's clocks, e.g. Europe/Berlin or America/Chicago; times typed without an "
                   "offset are read in it (blank: UTC)"),
        *[Field(column, label, "select", required=True, options=_unit_options(units.SITE_QUANTITIES[column]),
                help="shown on this site's pages and offered first on its forms")
          for column, label in (("pressure_unit", "Pressure shown in"), ("flow_unit", "Flow shown in"),
                                ("temperature_unit", "Temperature shown in"))],
        Field("decimal_comma", "Accept a decimal comma (120,5) in this site's forms and files", "checkbox"),
    ]


def _unit_options(quantity: str) -> tuple:
    return tuple((u, units.shown(u)) for u in units.SITE_UNITS[quantity])


def _site_initial(session: Session, key: str | None) -> dict:
    if key is None:
        return {"currency": "EUR", "tariff_per_kwh": "0.15", "motor_efficiency": "0.93", "time_zone": "UTC",
                "pressure_unit": "bar", "flow_unit": "L/min", "temperature_unit": "degC"}
    site = _get(session, Site, key)
    return {"site": site.name, "currency": site.currency, "tariff_per_kwh": _fmt(site.tariff_per_kwh),
            "motor_efficiency": _fmt(site.motor_efficiency), "note": _fmt(site.note), "time_zone": site.time_zone,
            "pressure_unit": site.pressure_unit, "flow_unit": site.flow_unit,
            "temperature_unit": site.temperature_unit, "decimal_comma": _fmt(site.decimal_comma)}


def _site_save(session: Session, key: str | None, values: dict) -> Saved:
    if key is not None:
        values = {**values, "site": _get(session, Site, key).name}  # the name keys the import; it is not edited
    # An unticked box sends nothing; here that means 'no', not 'leave as it was'.
    values = {**values, "decimal_comma": "yes" if values.get("decimal_comma") else "no"}
    result = _import_one(session, "sites", values, ["site", "currency", "tariff_per_kwh", "motor_efficiency", "note",
                                                    "time_zone", "pressure_unit", "flow_unit", "temperature_unit",
                                                    "decimal_comma"])
    site = session.scalar(select(Site).where(Site.name == values["site"].strip()))
    verb = "added" if result.created else "saved"
    return Saved(f"Site {site.name} {verb}.")


# --- machines --------------------------------------------------------------------------------------------------

def _machine_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("site_id", "Site", "select", required=True, options=_site_options(session)),
        Field("name", "Machine name", required=True, help="a power unit or machine with one reservoir"),
        Field("oil_id", "Oil in its reservoir", "select", options=_oil_options(session)),
        Field("note", "Note", "textarea"),
    ]


def _machine_initial(session: Session, key: str | None) -> dict:
    if key is None:
        return {}
    machine = _get(session, Machine, key)
    return {"site_id": str(machine.site_id), "name": machine.name, "oil_id": _fmt(machine.oil_id),
            "note": _fmt(machine.note)}


def _machine_save(session: Session, key: str | None, values: dict) -> Saved:
    form = Collector(values, "named")
    site_id = form.choice("site_id", {v for v, _ in _site_options(session)}, required=True)
    name = form.get("name")
    oil_id = form.choice("oil_id", {v for v, _ in _oil_options(session)})
    note = form.get("note")
    machine = None if key is None else _get(session, Machine, key)
    if site_id and name:
        clash = session.scalar(select(Machine).where(Machine.site_id == int(site_id), Machine.name == name))
        if clash is not None and clash is not machine:
            form.add("name", f"the site already has a machine '{name}'")
    form.raise_if_any()
    if machine is None:
        machine = Machine(site_id=int(site_id), name=name)
        session.add(machine)
    machine.site_id, machine.name, machine.note = int(site_id), name, note
    machine.oil_id = int(oil_id) if oil_id else None
    session.flush()
    return Saved(f"Machine {name} saved.")


# --- positions -------------------------------------------------------------------------------------------------

def _position_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("machine_id", "Machine", "select", required=True, options=_machine_options(session)),
        Field("name", "Position name", required=True, help="where on the machine a pump sits"),
    ]


def _position_initial(session: Session, key: str | None) -> dict:
    if key is None:
        return {}
    position = _get(session, Position, key)
    return {"machine_id": str(position.machine_id), "name": position.name}


def _position_save(session: Session, key: str | None, values: dict) -> Saved:
    form = Collector(values, "named")
    machine_id = form.choice("machine_id", {v for v, _ in _machine_options(session)}, required=True)
    name = form.get("name")
    position = None if key is None else _get(session, Position, key)
    if machine_id and name:
        clash = session.scalar(select(Position).where(Position.machine_id == int(machine_id), Position.name == name))
        if clash is not None and clash is not position:
            form.add("name", f"the machine already has a position '{name}'")
    form.raise_if_any()
    if position is None:
        position = Position(machine_id=int(machine_id), name=name)
        session.add(position)
    position.machine_id, position.name = int(machine_id), name
    session.flush()
    return Saved(f"Position {name} saved.")


# --- oils ------------------------------------------------------------------------------------------------------

def _oil_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("name", "Oil name", required=True, help="as filled; invented or your own label"),
        Field("iso_vg", "ISO VG grade", "number", help="e.g. 46"),
        Field("viscosity_40", "Viscosity at 40 °C", "number", required=True, quantity="viscosity",
              help="from the data sheet"),
        Field("viscosity_100", "Viscosity at 100 °C", "number", required=True, quantity="viscosity"),
        Field("density_15", "Density at 15 °C", "number", quantity="density", help="blank: 0.87 kg/L"),
    ]


def _oil_initial(session: Session, key: str | None) -> dict:
    if key is None:
        return {}
    oil = _get(session, Oil, key)
    return {"name": oil.name, "iso_vg": _fmt(oil.iso_vg), "viscosity_40": _fmt(oil.viscosity_40),
            "viscosity_100": _fmt(oil.viscosity_100), "density_15": _fmt(oil.density_15)}


def _oil_save(session: Session, key: str | None, values: dict) -> Saved:
    form = Collector(values, "oils")
    name, grade = form.get("name"), form.get("iso_vg")
    nu40, nu100, density = form.get("viscosity_40"), form.get("viscosity_100"), form.get("density_15")
    form.check(rules.oil_thins_when_hot(form.row()))
    oil = None if key is None else _get(session, Oil, key)
    if name:
        clash = session.scalar(select(Oil).where(Oil.name == name))
        if clash is not None and clash is not oil:
            form.add("name", f"an oil '{name}' is already registered")
    form.raise_if_any()
    if oil is not None and oil.name != name:
        oil.name = name
        session.flush()
    oil = register.set_oil(session, name, nu40, nu100, density, int(grade) if grade else None)
    return Saved(f"Oil {name} saved.")


# --- pumps -----------------------------------------------------------------------------------------------------

_PUMP_NUMBERS = {  # field -> unit quantity offered beside it
    "displacement": "displacement", "rated_speed": "speed", "rated_pressure": "pressure", "max_flow": "flow",
    "reference_temp": "temperature", "oil_temp_max": "temperature", "oil_temp_min": "temperature",
    "installed_hours": "hours",
}
_PUMP_COLUMNS = ["pump", "site", "machine", "position", "kind", "variable", "displacement", "rated_speed",
                 "rated_pressure", "max_flow", "case_drain", "reference_temp", "oil", "oil_grade", "viscosity_40",
                 "viscosity_100", "density_15", "eta_v_limit", "drain_limit_pct", "oil_temp_max", "oil_temp_min",
                 "cleanliness_target", "reading_interval_days", "planning_horizon_weeks", "overhaul_cost",
                 "installed_at", "installed_hours", "note"]


def _pump_fields(session: Session, key: str | None) -> list[Field]:
    blank = "blank: the kind's default"
    return [
        Field("pump", "Serial or tag", required=True, readonly=key is not None),
        Field("position_id", "Position", "select", required=True, options=_position_options(session),
              help="the pump takes the oil of this machine's reservoir"),
        Field("kind", "Pump kind", "select", required=True, options=_kind_options()),
        Field("variable", "Variable displacement", "checkbox"),
        Field("case_drain", "Has a case drain to measure", "checkbox"),
        Field("displacement", "Displacement", "number", True, "displacement"),
        Field("rated_speed", "Rated speed", "number", True, "speed"),
        Field("rated_pressure", "Rated pressure", "number", True, "pressure"),
        Field("max_flow", "Maximum flow", "number", quantity="flow", help="blank: displacement × rated speed"),
        Field("reference_temp", "Reference oil temperature", "number", quantity="temperature", help="blank: 50 °C"),
        Field("eta_v_limit", "Volumetric efficiency limit", "number", help=f"fraction; {blank}"),
        Field("drain_limit_pct", "Case drain limit, % of max flow", "number", help=blank),
        Field("oil_temp_max", "Oil temperature upper limit", "number", quantity="temperature", help=blank),
        Field("oil_temp_min", "Oil temperature lower limit", "number", quantity="temperature", help=blank),
        Field("cleanliness_target", "Cleanliness target (ISO 4406)", help=f"e.g. 18/16/13; {blank}"),
        Field("reading_interval_days", "Days between readings", "number", help=blank),
        Field("planning_horizon_weeks", "Planning horizon, weeks", "number", help=blank),
        Field("overhaul_cost", "Expected overhaul cost", "number", help="site currency; for the payback"),
        Field("installed_at", "Installed on", "datetime",
              help="when it went into this position (blank: now)" if key is None else
              "only when the position changes: when it moved (blank: now)"),
        Field("installed_hours", "Hour meter then", "number", quantity="hours"),
        Field("note", "Note", "textarea"),
    ]


def _pump_initial(session: Session, key: str | None) -> dict:
    if key is None:
        return {}
    pump = session.scalar(select(Pump).where(Pump.serial == key))
    if pump is None:
        raise NotFound(f"no pump {key}")
    current = register.current_installation(pump)
    return {
        "pump": pump.serial, "position_id": str(current.position_id) if current else "", "kind": pump.kind,
        "variable": _fmt(pump.variable), "case_drain": _fmt(pump.case_drain),
        "displacement": _fmt(pump.displacement_cc), "rated_speed": _fmt(pump.rated_speed_rpm),
        "rated_pressure": _fmt(pump.rated_pressure_bar), "max_flow": _fmt(pump.max_flow_lpm),
        "reference_temp": _fmt(pump.reference_temp_c), "eta_v_limit": _fmt(pump.eta_v_limit),
        "drain_limit_pct": _fmt(pump.drain_limit_pct), "oil_temp_max": _fmt(pump.oil_temp_max_c),
        "oil_temp_min": _fmt(pump.oil_temp_min_c), "cleanliness_target": _fmt(pump.cleanliness_target),
        "reading_interval_days": _fmt(pump.reading_interval_days),
        "planning_horizon_weeks": _fmt(pump.planning_horizon_weeks), "overhaul_cost": _fmt(pump.overhaul_cost),
        "note": _fmt(pump.note),
    }


def _pump_save(session: Session, key: str | None, values: dict) -> Saved:
    form = Collector(values, "pumps")
    position_id = form.choice("position_id", {v for v, _ in _position_options(session)}, required=True)
    serial = key if key is not None else form.get("pump")
    if key is None and serial and session.scalar(select(Pump.id).where(Pump.serial == serial)) is not None:
        form.add("pump", f"a pump '{serial}' is already registered: edit it instead")
    oil = None
    if position_id:
        position = session.get(Position, int(position_id))
        oil = position.machine.oil
        if oil is None:
            form.add("position_id", f"machine '{position.machine.name}' has no oil recorded: set its oil first")
    form.raise_if_any()
    row = {name: values.get(name) for name in _PUMP_COLUMNS}
    row.update({name + "__unit": values.get(name + "__unit") for name in _PUMP_NUMBERS})
    row.update(pump=serial, site=position.machine.site.name, machine=position.machine.name, position=position.name,
               oil=oil.name, oil_grade=_fmt(oil.iso_vg), viscosity_40=_fmt(oil.viscosity_40),
               viscosity_100=_fmt(oil.viscosity_100), density_15=_fmt(oil.density_15),
               variable="yes" if values.get("variable") else "no",
               case_drain="yes" if values.get("case_drain") else "no")
    result = _import_one(session, "pumps", row, _PUMP_COLUMNS, _PUMP_NUMBERS)
    verb = "added" if result.created else "saved"
    return Saved(f"Pump {serial} {verb}.")


# --- default limits per kind -----------------------------------------------------------------------------------

def _limit_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("eta_v_limit", "Volumetric efficiency limit", "number", True, help="fraction, e.g. 0.85"),
        Field("drain_limit_pct", "Case drain limit, % of max flow", "number", help="blank: no case drain limit"),
        Field("oil_temp_max", "Oil temperature upper limit", "number", True, "temperature"),
        Field("oil_temp_min", "Oil temperature lower limit", "number", True, "temperature"),
        Field("cleanliness_target", "Cleanliness target (ISO 4406)", required=True),
        Field("reading_interval_days", "Days between readings", "number", True),
        Field("planning_horizon_weeks", "Planning horizon, weeks", "number", True),
        Field("source", "Where these values come from", "textarea", True),
    ]


def _limit_row(session: Session, key: str | None) -> LimitDefault:
    row = session.get(LimitDefault, key) if key in PUMP_KINDS else None
    if row is None:
        raise NotFound(f"no default limits for kind {key}")
    return row


def _limit_initial(session: Session, key: str | None) -> dict:
    row = _limit_row(session, key)
    return {"eta_v_limit": _fmt(row.eta_v_limit), "drain_limit_pct": _fmt(row.drain_limit_pct),
            "oil_temp_max": _fmt(row.oil_temp_max_c), "oil_temp_min": _fmt(row.oil_temp_min_c),
            "cleanliness_target": row.cleanliness_target, "reading_interval_days": _fmt(row.reading_interval_days),
            "planning_horizon_weeks": _fmt(row.planning_horizon_weeks), "source": row.source}


def _limit_save(session: Session, key: str | None, values: dict) -> Saved:
    row = _limit_row(session, key)
    form = Collector(values, "limits")
    eta, drain = form.get("eta_v_limit"), form.get("drain_limit_pct")
    t_max, t_min = form.get("oil_temp_max"), form.get("oil_temp_min")
    code, source = form.get("cleanliness_target"), form.get("source")
    interval, horizon = form.get("reading_interval_days"), form.get("planning_horizon_weeks")
    form.check(rules.low_below_high(form.row(), "oil_temp_min", "oil_temp_max"))
    form.raise_if_any()
    row.eta_v_limit, row.drain_limit_pct, row.oil_temp_max_c, row.oil_temp_min_c = eta, drain, t_max, t_min
    row.cleanliness_target, row.source = str(code), source
    row.reading_interval_days, row.planning_horizon_weeks = int(interval), int(horizon)
    session.flush()
    return Saved(f"Default limits of {PUMP_KINDS[key].lower()} pumps saved.")


SITE_TIME = "local time of the pump's site (its time zone in the register)"


# --- installations and removals --------------------------------------------------------------------------------

def _install_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("pump", "Pump", "select", required=True, options=_pump_options(session)),
        Field("position_id", "Into position", "select", required=True, options=_position_options(session)),
        Field("installed_at", "Installed on", "datetime", required=True, help=SITE_TIME),
        Field("hours", "Pump hour meter then", "number", quantity="hours"),
    ]


def _install_save(session: Session, key: str | None, values: dict) -> Saved:
    form = Collector(values, "installations")
    position_id = form.choice("position_id", {v for v, _ in _position_options(session)}, required=True)
    form.raise_if_any()
    position = session.get(Position, int(position_id))
    row = {**values, "site": position.machine.site.name, "machine": position.machine.name,
           "position": position.name}
    result = _import_one(session, "installations", row, ["pump", "site", "machine", "position", "installed_at",
                                                         "hours"], {"hours": "hours"})
    if not result.created:
        raise FormRejected({"installed_at": ["this installation is already recorded"]})
    return Saved(f"Pump {values.get('pump')} recorded in {position.machine.name} / {position.name}.")


def _removal_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("pump", "Pump", "select", required=True, options=_pump_options(session, installed_only=True)),
        Field("removed_at", "Removed on", "datetime", required=True, help=SITE_TIME),
        Field("hours", "Pump hour meter then", "number", quantity="hours"),
    ]


def _removal_save(session: Session, key: str | None, values: dict) -> Saved:
    form = Collector(values, "removals")
    serial = form.choice("pump", {v for v, _ in _pump_options(session, installed_only=True)}, required=True)
    if serial is not None:  # its time is read in the pump's site's zone, its number with that site's decimal mark
        site = sitelocal.of_pump(session, serial)
        form.zone, form.decimal_comma = site.time_zone, site.decimal_comma
    removed_at, hours = form.get("removed_at"), form.get("hours")
    form.check(rules.not_in_future(form.row(), "removed_at", utcnow()))
    form.raise_if_any()
    pump = session.scalar(select(Pump).where(Pump.serial == serial))
    current = register.current_installation(pump)
    if removed_at < current.installed_at:
        form.add("removed_at", f"is before the pump went in ({current.installed_at:%Y-%m-%d %H:%M})")
    if hours is not None and current.installed_hours is not None and hours < current.installed_hours:
        form.add("hours", f"is below the hour meter at installation ({current.installed_hours:g} h)")
    form.raise_if_any()
    current.removed_at, current.removed_hours = removed_at, hours
    session.flush()
    return Saved(f"Pump {serial} recorded as removed.")


# --- maintenance events and lab results ------------------------------------------------------------------------

def _event_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("pump", "Pump", "select", required=True, options=_pump_options(session)),
        Field("date", "Date", "datetime", required=True, help=SITE_TIME),
        Field("kind", "Work done", "select", required=True, options=tuple(EVENT_KINDS.items())),
        Field("hours", "Pump hour meter", "number", quantity="hours"),
        Field("cost", "Cost", "number", help="site currency"),
        Field("downtime", "Downtime", "number", quantity="hours", help="hours"),
        Field("failure_mode", "Failure mode", "select",
              options=(("", "none / not a failure"),) + tuple((m, m.replace("_", " ")) for m in FAILURE_MODES)),
        Field("note", "As found", "textarea"),
    ]


def _event_save(session: Session, key: str | None, values: dict) -> Saved:
    _import_one(session, "events", values, ["pump", "date", "hours", "kind", "cost", "downtime", "failure_mode",
                                            "note"], {"hours": "hours", "downtime": "hours"})
    kind = EVENT_KINDS.get((values.get("kind") or "").strip().lower(), "Event")
    return Saved(f"{kind} of pump {values.get('pump')} recorded.")


def _sample_fields(session: Session, key: str | None) -> list[Field]:
    return [
        Field("machine_id", "Machine (reservoir)", "select", required=True, options=_machine_options(session)),
        Field("sampled_at", "Sampled on", "datetime", required=True, help=SITE_TIME),
        Field("reported_at", "Reported on", "datetime", help="blank: still at the lab"),
        Field("iso4406", "ISO 4406 code", help="e.g. 18/16/13 or -/16/13"),
        Field("water", "Water", "number", help="ppm"),
        Field("viscosity_40", "Measured viscosity at 40 °C", "number", quantity="viscosity"),
        Field("lab_ref", "Lab reference"),
        Field("note", "Note", "textarea"),
    ]


def _sample_save(session: Session, key: str | None, values: dict) -> Saved:
    form = Collector(values, "samples")
    machine_id = form.choice("machine_id", {v for v, _ in _machine_options(session)}, required=True)
    form.raise_if_any()
    machine = session.get(Machine, int(machine_id))
    row = {**values, "site": machine.site.name, "machine": machine.name}
    _import_one(session, "samples", row, ["site", "machine", "sampled_at", "reported_at", "iso4406", "water",
                                          "viscosity_40", "lab_ref", "note"], {"viscosity_40": "viscosity"})
    return Saved(f"Lab result for {machine.name} recorded.")


def _no_initial(session: Session, key: str | None) -> dict:
    return {}


def _now_initial(name: str) -> Callable[[Session, str | None], dict]:
    """Now as the form's default: the sites' local time when they share one zone. The pump (so its site) is chosen
    in the same form, so with sites in different zones the time is left for the user to type."""
    def initial(session: Session, key: str | None) -> dict:
        zones = set(session.scalars(select(Site.time_zone))) or {"UTC"}
        return {name: form_value(utcnow(), zones.pop()) if len(zones) == 1 else ""}
    return initial


NEW_ONLY, EDIT_ONLY = frozenset({"new"}), frozenset({"edit"})
FORMS: dict[str, RegisterForm] = {
    "site": RegisterForm("Site", _site_fields, _site_initial, _site_save),
    "machine": RegisterForm("Machine", _machine_fields, _machine_initial, _machine_save),
    "position": RegisterForm("Position", _position_fields, _position_initial, _position_save),
    "oil": RegisterForm("Oil", _oil_fields, _oil_initial, _oil_save),
    "pump": RegisterForm("Pump", _pump_fields, _pump_initial, _pump_save),
    "limits": RegisterForm("Default limits", _limit_fields, _limit_initial, _limit_save, EDIT_ONLY),
    "installation": RegisterForm("Installation", _install_fields, _now_initial("installed_at"), _install_save,
                                 NEW_ONLY),
    "removal": RegisterForm("Removal", _removal_fields, _now_initial("removed_at"), _removal_save, NEW_ONLY),
    "event": RegisterForm("Maintenance event", _event_fields, _now_initial("date"), _event_save, NEW_ONLY),
    "sample": RegisterForm("Lab result", _sample_fields, _no_initial, _sample_save, NEW_ONLY),
}
