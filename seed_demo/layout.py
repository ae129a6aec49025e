"""The invented demo plant's layout: sites, machines, oils and which pump sits where.

Everything here is made up for the demo (no real company, place, brand or model number). Rated data that is
not fixed here is drawn by seed_demo.fleet_specs from catalogue-like steps per pump kind.
"""

from dataclasses import dataclass

DEMO_LABEL = "invented demo data"


@dataclass(frozen=True)
class Site:
    name: str
    currency: str
    tariff_per_kwh: float
    motor_efficiency: float
    note: str


@dataclass(frozen=True)
class Oil:
    name: str
    grade: int  # ISO VG
    nu40_cst: float
    nu100_cst: float
    density15_kg_per_l: float


@dataclass(frozen=True)
class Machine:
    name: str
    site: str
    round_days: int  # a reading round every so many days
    oil: Oil
    temp_offset_c: float  # how much hotter than a plain power unit this machine's oil runs
    hours_per_day: tuple[float, float]  # range the pumps' daily running hours are drawn from
    reference_temp_c: float
    note: str


@dataclass(frozen=True)
class Slot:
    """A pump in its first position, with its scenario role (how it wears over the demo period)."""

    pump: str
    machine: str
    position: str
    kind: str
    variable: bool
    role: str  # healthy, near_limit, past_limit, overhauled


SITES = (
    Site("East Yard", "EUR", 0.19, 0.94, f"Invented demo site: presses, a power unit and a test rig ({DEMO_LABEL})"),
    Site("River Shop", "EUR", 0.16, 0.95, f"Invented demo site: shear line, lube skid, tilt table ({DEMO_LABEL})"),
)

# Data-sheet style values for plain mineral HM oils, VI about 100 (typical values, from memory).
OIL_VG32 = Oil("house mineral HM 32", 32, 32.0, 5.4, 0.865)
OIL_VG46 = Oil("house mineral HM 46", 46, 46.0, 6.8, 0.870)
OIL_VG68 = Oil("house mineral HM 68", 68, 68.0, 8.7, 0.875)

MACHINES = (
    Machine("power-unit-1", "East Yard", 7, OIL_VG46, 0.0, (18.0, 22.0), 50.0, "central power unit, weekly round"),
    Machine("press-2", "East Yard", 14, OIL_VG46, 2.0, (12.0, 16.0), 50.0, "forming press"),
    Machine("test-rig", "East Yard", 7, OIL_VG32, 16.0, (8.0, 12.0), 50.0, "pump test rig, runs hot"),
    Machine("clamp-unit", "East Yard", 14, OIL_VG46, 1.0, (14.0, 20.0), 50.0, "clamping unit"),
    Machine("power-unit-2", "River Shop", 14, OIL_VG46, 0.0, (16.0, 22.0), 50.0, "ring main power unit"),
    Machine("shear-line", "River Shop", 14, OIL_VG68, 4.0, (10.0, 16.0), 50.0, "shear line, dusty bay"),
    Machine("lube-skid", "River Shop", 14, OIL_VG68, -3.0, (20.0, 22.0), 45.0, "gearbox lubrication skid"),
    Machine("tilt-table", "River Shop", 14, OIL_VG46, 0.0, (8.0, 11.0), 50.0, "tilting table"),
)

SLOTS = (
    Slot("EY-101", "power-unit-1", "pump 1", "axial_piston", True, "healthy"),
    Slot("EY-102", "power-unit-1", "pump 2", "axial_piston", True, "healthy"),  # case drain doubles last week
    Slot("EY-103", "power-unit-1", "pump 3", "axial_piston", True, "healthy"),
    Slot("EY-104", "power-unit-1", "pump 4", "internal_gear", False, "healthy"),  # moved to press-2
    Slot("EY-105", "power-unit-1", "pilot", "vane", False, "healthy"),
    Slot("EY-106", "power-unit-1", "boost", "external_gear", False, "healthy"),
    Slot("EY-107", "power-unit-1", "cooling loop", "gerotor", False, "healthy"),
    Slot("EY-201", "press-2", "main", "axial_piston", True, "healthy"),
    Slot("EY-202", "press-2", "pump 2", "internal_gear", False, "healthy"),  # replaced by EY-104, to spares
    Slot("EY-203", "press-2", "fast approach", "external_gear", False, "past_limit"),
    Slot("EY-204", "press-2", "clamp", "vane", False, "overhauled"),
    Slot("EY-205", "press-2", "high pressure", "radial_piston", False, "healthy"),
    Slot("EY-301", "test-rig", "load pump", "axial_piston", False, "healthy"),
    Slot("EY-302", "test-rig", "charge", "external_gear", False, "near_limit"),
    Slot("EY-303", "test-rig", "supply", "vane", True, "healthy"),
    Slot("EY-304", "test-rig", "filter loop", "gerotor", False, "healthy"),
    Slot("EY-401", "clamp-unit", "main", "axial_piston", True, "past_limit"),
    Slot("EY-402", "clamp-unit", "pilot", "vane", False, "healthy"),
    Slot("EY-403", "clamp-unit", "fill", "external_gear", False, "healthy"),
    Slot("EY-404", "clamp-unit", "pump 2", "internal_gear", False, "healthy"),
    Slot("EY-405", "clamp-unit", "intensifier feed", "radial_piston", False, "near_limit"),
    Slot("RS-501", "power-unit-2", "pump 1", "axial_piston", True, "overhauled"),
    Slot("RS-502", "power-unit-2", "pump 2", "axial_piston", True, "near_limit"),
    Slot("RS-503", "power-unit-2", "pump 3", "vane", True, "past_limit"),
    Slot("RS-504", "power-unit-2", "boost", "external_gear", False, "healthy"),
    Slot("RS-505", "power-unit-2", "pilot", "internal_gear", False, "healthy"),
    Slot("RS-506", "power-unit-2", "flushing", "external_gear", False, "healthy"),
    Slot("RS-601", "shear-line", "main", "axial_piston", False, "healthy"),
    Slot("RS-602", "shear-line", "blade return", "external_gear", False, "overhauled"),
    Slot("RS-603", "shear-line", "clamp", "vane", False, "healthy"),
    Slot("RS-604", "shear-line", "hold down", "radial_piston", False, "healthy"),
    Slot("RS-605", "shear-line", "conveyor", "external_gear", False, "near_limit"),
    Slot("RS-701", "lube-skid", "transfer 1", "lobe", False, "healthy"),
    Slot("RS-702", "lube-skid", "transfer 2", "lobe", False, "healthy"),
    Slot("RS-703", "lube-skid", "bearing feed 1", "gerotor", False, "healthy"),
    Slot("RS-704", "lube-skid", "bearing feed 2", "gerotor", False, "healthy"),
    Slot("RS-705", "lube-skid", "spray", "internal_gear", False, "healthy"),
    Slot("RS-706", "lube-skid", "scavenge", "external_gear", False, "healthy"),
    Slot("RS-801", "tilt-table", "lift", "vane", False, "healthy"),
    Slot("RS-802", "tilt-table", "tilt", "external_gear", False, "healthy"),
    Slot("RS-803", "tilt-table", "lock", "radial_piston", False, "healthy"),
)

# The one move between machines: EY-104 takes EY-202's place on press-2; EY-202 goes to the spares shelf.
# Both machines run the same HM 46 and refer to 50 degC, so the moved pump's reference viscosity is unchanged.
SWAP_PUMP = "EY-104"
SWAP_REPLACES = "EY-202"
SWAP_DAYS_BEFORE_END = 260

# A case drain that doubles in the last week (a failing part inside the pump), on a weekly round.
DRAIN_JUMP_PUMP = "EY-102"

# Pumps whose readings stopped some weeks before the last round (days before end of their last reading).
OVERDUE_LAST_READING_DAYS = {"RS-803": 63, "EY-404": 42}

# Pumps held to their own limit instead of the kind default (the rest leave eta_v_limit blank).
ETA_V_LIMIT_OVERRIDES = {"EY-301": 0.90, "RS-604": 0.83}

# Overhauls: days before end, failure mode and what the fitter found (invented as-found notes).
OVERHAULS = {
    "RS-501": (
        430,
        "internal_leakage",
        "as found: valve plate and block face scored, slippers worn; rotating group renewed",
    ),
    "EY-204": (200, "noise", "as found: chatter marks on the cam ring, vane tips worn; new cartridge fitted"),
    "RS-602": (565, "low_output", "as found: side plates worn through to the bronze, bushings scored; rebuilt"),
}

# Machine-wide oil care, logged against the machine's first pump: (machine, days before end, kind, cost, note).
OIL_CARE = (
    ("shear-line", 395, "filter_change", 180.0, "pressure and return elements changed after a dirty sample"),
    ("test-rig", 610, "oil_change", 1450.0, "reservoir drained and refilled after a hot summer"),
    ("lube-skid", 300, "oil_change", 2100.0, "scheduled oil change, reservoir cleaned"),
    ("power-unit-2", 150, "filter_change", 240.0, "return filter differential indicator showed red"),
)

# Oil samples: the machine whose latest sample is still at the lab, and the one whose latest sample is dirty.
LAB_PENDING_MACHINE = "clamp-unit"
LAB_PENDING_DAYS = 18
DIRTY_MACHINE = "shear-line"

TECHNICIANS = ("J. Marsh", "R. Kell", "S. Lind", "T. Doyle")
