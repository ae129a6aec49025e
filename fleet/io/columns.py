"""The CSV columns of every import/export kind: name, type, unit quantity, whether required, and bounds.

One table serves the importer, the exporter, the README's format section and the upload page.
"""

from dataclasses import dataclass


@dataclass(frozen=True)
class Column:
    name: str
    type: str  # number | text | bool | datetime | kind | event_kind | failure_mode | iso4406 | source
    quantity: str | None = None  # a key of fleet.units.CANONICAL for numbers with a unit
    required: bool = False
    min: float | None = None  # inclusive bounds, in canonical units
    max: float | None = None
    positive: bool = False  # strictly above zero
    help: str = ""
    export_unit: str | None = None  # header unit written on export (defaults to the canonical label)
    integer: bool = False  # a whole number (a count of days or weeks, a grade)
    default_unit: str | None = None  # the unit of a bare number when it is not the canonical one (stroke: %)


def _num(name, quantity, help_, required=False, min_=None, max_=None, positive=False, export_unit=None,
         integer=False, default_unit=None):
    return Column(name, "number", quantity, required, min_, max_, positive, help_, export_unit, integer,
                  default_unit)


# Bounds shared by several kinds, so a form and a file refuse the same values.
OIL_TEMP_C = {"min_": -40, "max_": 150}  # hydraulic oil in service, cold start to far past any limit
ETA_V_LIMIT = {"min_": 0.3, "max_": 0.999}
ISO_VG_MAX = 3200  # the thickest ISO 3448 grade
DAYS_MAX, WEEKS_MAX = 3650, 520  # ten years between readings, ten years of planning
# A reading is of a running pump under load: below these the referral to rated pressure and speed would multiply
# gauge and tachometer error by hundreds (slip scales with p_rated / p). Our choice, stated in README.
READING_PRESSURE_MIN_BAR = 1.0
READING_SPEED_MIN_RPM = 10.0


SITES = (
    Column("site", "text", required=True, help="site name"),
    Column("currency", "text", help="currency code for costs, e.g. EUR"),
    _num("tariff_per_kwh", None, "electricity price per kWh, site currency", min_=0),
    _num("motor_efficiency", "fraction", "drive motor efficiency (fraction, or tag the header [%])",
         min_=0.3, max_=1.0),
    Column("note", "text"),
    Column("time_zone", "text", help="IANA time zone of the site's clocks, e.g. America/Chicago (default UTC)"),
    Column("pressure_unit", "text", help="pressure shown on pages and typed in forms: bar, psi, kPa or MPa"),
    Column("flow_unit", "text", help="flow shown and typed: L/min, gal/min (US) or m**3/h"),
    Column("temperature_unit", "text", help="temperature shown and typed: degC or degF"),
    Column("decimal_comma", "bool", help="accept a decimal comma (120,5) in this site's forms and files (yes/no)"),
)

PUMPS = (
    Column("pump", "text", required=True, help="serial number or tag; unique"),
    Column("site", "text", required=True),
    Column("machine", "text", required=True, help="hydraulic power unit or machine (one reservoir)"),
    Column("position", "text", required=True, help="where on the machine the pump sits"),
    Column("kind", "kind", required=True,
           help="external_gear, internal_gear, gerotor, lobe, vane, axial_piston, radial_piston"),
    Column("variable", "bool", help="variable displacement (yes/no; default no)"),
    _num("displacement", "displacement", "geometric displacement per revolution", True, positive=True),
    _num("rated_speed", "speed", "rated shaft speed", True, positive=True),
    _num("rated_pressure", "pressure", "rated outlet pressure", True, positive=True),
    _num("max_flow", "flow", "maximum flow (default displacement x rated speed)", positive=True),
    Column("case_drain", "bool", help="has an external case drain to measure (yes/no; default no)"),
    _num("reference_temp", "temperature", "oil temperature readings are referred to (default 50 degC)",
         min_=0, max_=120),
    Column("oil", "text", required=True, help="oil name as filled in the machine's reservoir"),
    _num("oil_grade", None, "ISO VG grade number", positive=True, integer=True, max_=ISO_VG_MAX),
    _num("viscosity_40", "viscosity", "oil data sheet viscosity at 40 degC", True, positive=True),
    _num("viscosity_100", "viscosity", "oil data sheet viscosity at 100 degC", True, positive=True),
    _num("density_15", "density", "oil density at 15 degC (default 0.87 kg/L)", min_=0.6, max_=1.3),
    _num("eta_v_limit", "fraction", "volumetric efficiency limit (fraction; blank = kind default)", **ETA_V_LIMIT),
    _num("drain_limit_pct", None, "case drain limit, % of max flow (blank = kind default)", min_=0, max_=100),
    _num("oil_temp_max", "temperature", "oil temperature upper limit (blank = kind default)", **OIL_TEMP_C),
    _num("oil_temp_min", "temperature", "oil temperature lower limit (blank = kind default)", **OIL_TEMP_C),
    Column("cleanliness_target", "iso4406", help="ISO 4406 target code, e.g. 18/16/13 (blank = kind default)"),
    _num("reading_interval_days", None, "days between readings (blank = kind default)", positive=True,
         integer=True, max_=DAYS_MAX),
    _num("planning_horizon_weeks", None, "planning horizon (blank = kind default)", positive=True, integer=True,
         max_=WEEKS_MAX),
    _num("overhaul_cost", None, "expected cost of an overhaul, site currency", min_=0),
    Column("installed_at", "datetime", help="when the pump went into this position (default: now)"),
    _num("installed_hours", "hours", "pump hour meter then", min_=0),
    Column("note", "text"),
)

INSTALLATIONS = (
    Column("pump", "text", required=True),
    Column("site", "text", required=True),
    Column("machine", "text", required=True),
    Column("position", "text", required=True),
    Column("installed_at", "datetime", required=True),
    _num("hours", "hours", "pump hour meter at installation", min_=0),
)

READINGS = (
    Column("pump", "text", required=True),
    Column("taken_at", "datetime", required=True),
    _num("hours", "hours", "pump running hours (hour meter)", True, min_=0),
    _num("outlet_pressure", "pressure", "outlet pressure (gauge) of the running pump", True,
         min_=READING_PRESSURE_MIN_BAR),
    _num("speed", "speed", "shaft speed of the running pump", True, min_=READING_SPEED_MIN_RPM),
    _num("outlet_flow", "flow", "outlet flow (blank if not measured)", min_=0),
    _num("case_drain_flow", "flow", "case drain flow (blank if not measured)", min_=0),
    _num("oil_temp", "temperature", "oil temperature", True, **OIL_TEMP_C),
    _num("stroke", "fraction", "displacement setting of a variable pump, in % unless the header says otherwise "
         "(10 to 100; blank = full)", min_=0.1, max_=1.0, export_unit="%", default_unit="%"),
    Column("taken_by", "text"),
    Column("note", "text"),
    Column("source", "source", help="form, import or api (default import)"),
)

FLOWTESTS = (
    Column("pump", "text", required=True),
    Column("taken_at", "datetime", required=True, help="the visit: a reading of the pump at this time"),
    _num("outlet_pressure", "pressure", "test point pressure", True, min_=0),
    _num("outlet_flow", "flow", "test point flow", True, min_=0),
)

SAMPLES = (
    Column("site", "text", help="needed when two sites have a machine of the same name"),
    Column("machine", "text", required=True, help="the machine (reservoir) sampled"),
    Column("sampled_at", "datetime", required=True),
    Column("reported_at", "datetime", help="when the lab reported (blank: still at the lab)"),
    Column("iso4406", "iso4406", help="ISO 4406 code, e.g. 18/16/13 or -/16/13"),
    _num("count_4", "count", "particles per mL >= 4 µm(c) (code computed when no iso4406)", min_=0),
    _num("count_6", "count", "particles per mL >= 6 µm(c)", min_=0),
    _num("count_14", "count", "particles per mL >= 14 µm(c)", min_=0),
    _num("water", "concentration", "water content", min_=0),
    _num("viscosity_40", "viscosity", "measured viscosity at 40 degC", positive=True),
    Column("lab_ref", "text"),
    Column("note", "text"),
)

EVENTS = (
    Column("pump", "text", required=True),
    Column("date", "datetime", required=True),
    _num("hours", "hours", "pump running hours at the event", min_=0),
    Column("kind", "event_kind", required=True,
           help="overhaul, replacement, seal_repair, shaft_repair, filter_change, oil_change, inspection"),
    _num("cost", None, "cost, site currency", min_=0),
    _num("downtime", "duration", "downtime", min_=0),
    Column("failure_mode", "failure_mode", help="low_output, internal_leakage, external_leakage, noise, "
           "overheating, vibration, seizure, other"),
    Column("note", "text", help="as-found notes"),
)

KINDS: dict[str, tuple[Column, ...]] = {
    "sites": SITES,
    "pumps": PUMPS,
    "installations": INSTALLATIONS,
    "readings": READINGS,
    "flowtests": FLOWTESTS,
    "samples": SAMPLES,
    "events": EVENTS,
}
# Records only forms write (no CSV kind of their own): declared alike, so the forms check them with the same
# parser and the same words as a file.
OILS = (
    Column("name", "text", required=True, help="oil name as filled"),
    _num("iso_vg", None, "ISO VG grade number", positive=True, integer=True, max_=ISO_VG_MAX),
    _num("viscosity_40", "viscosity", "data sheet viscosity at 40 degC", True, positive=True),
    _num("viscosity_100", "viscosity", "data sheet viscosity at 100 degC", True, positive=True),
    _num("density_15", "density", "density at 15 degC (default 0.87 kg/L)", min_=0.6, max_=1.3),
)

LIMITS = (
    _num("eta_v_limit", "fraction", "volumetric efficiency limit", True, **ETA_V_LIMIT),
    _num("drain_limit_pct", None, "case drain limit, % of max flow (blank: none)", min_=0, max_=100),
    _num("oil_temp_max", "temperature", "oil temperature upper limit", True, **OIL_TEMP_C),
    _num("oil_temp_min", "temperature", "oil temperature lower limit", True, **OIL_TEMP_C),
    Column("cleanliness_target", "iso4406", required=True, help="ISO 4406 target code"),
    _num("reading_interval_days", None, "days between readings", True, positive=True, integer=True, max_=DAYS_MAX),
    _num("planning_horizon_weeks", None, "planning horizon", True, positive=True, integer=True, max_=WEEKS_MAX),
    Column("source", "text", required=True, help="where these values come from"),
)

NAMED = (  # sites' machines and machines' positions
    Column("name", "text", required=True),
    Column("note", "text"),
)

REMOVALS = (
    Column("removed_at", "datetime", required=True),
    _num("hours", "hours", "pump hour meter at removal", min_=0),
)

WINDOWS = (
    Column("starts_at", "datetime", required=True),
    Column("ends_at", "datetime", required=True),
    Column("note", "text"),
)

FORM_KINDS: dict[str, tuple[Column, ...]] = {
    "oils": OILS, "limits": LIMITS, "named": NAMED, "removals": REMOVALS, "windows": WINDOWS,
}

# The order a whole plant is loaded in: each kind refers only to kinds before it.
LOAD_ORDER = ("sites", "pumps", "installations", "readings", "flowtests", "samples", "events")
