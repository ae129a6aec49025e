"""Turn the simulated demo plant into the import tables, with the exact headers the importer reads.

Dates are ISO strings (YYYY-MM-DD, datetimes YYYY-MM-DDTHH:MM); a blank cell is NaN.
"""

import numpy as np
import pandas as pd

from fleet.kinds import PISTON_KINDS
from fleet.limits import DEFAULT_LIMITS
from seed_demo.layout import MACHINES, SITES, SWAP_PUMP, SWAP_REPLACES

DATE = "%Y-%m-%d"
DATETIME = "%Y-%m-%dT%H:%M"

SITE_HEADERS = ["site", "currency", "tariff_per_kwh", "motor_efficiency", "note"]
PUMP_HEADERS = [
    "pump",
    "site",
    "machine",
    "position",
    "kind",
    "variable",
    "displacement [cm3/rev]",
    "rated_speed [rpm]",
    "rated_pressure [bar]",
    "max_flow [L/min]",
    "case_drain",
    "reference_temp [degC]",
    "oil",
    "oil_grade",
    "viscosity_40 [mm2/s]",
    "viscosity_100 [mm2/s]",
    "density_15 [kg/L]",
    "eta_v_limit",
    "drain_limit_pct",
    "overhaul_cost",
    "installed_at",
    "installed_hours [h]",
    "note",
]
INSTALLATION_HEADERS = ["pump", "site", "machine", "position", "installed_at", "hours [h]"]
READING_HEADERS = [
    "pump",
    "taken_at",
    "hours [h]",
    "outlet_pressure [bar]",
    "speed [rpm]",
    "outlet_flow [L/min]",
    "case_drain_flow [L/min]",
    "oil_temp [degC]",
    "stroke [%]",
    "taken_by",
    "note",
]
FLOWTEST_HEADERS = ["pump", "taken_at", "outlet_pressure [bar]", "outlet_flow [L/min]"]
SAMPLE_HEADERS = [
    "site",
    "machine",
    "sampled_at",
    "reported_at",
    "iso4406",
    "count_4 [1/mL]",
    "count_6 [1/mL]",
    "count_14 [1/mL]",
    "water [ppm]",
    "viscosity_40 [mm2/s]",
    "lab_ref",
]
EVENT_HEADERS = ["pump", "date", "hours [h]", "kind", "cost", "downtime [h]", "failure_mode", "note"]


def yes_no(flags: pd.Series) -> pd.Series:
    return flags.map({True: "yes", False: "no"})


def blank_empty(text: pd.Series) -> pd.Series:
    """Empty or missing text becomes a blank (NaN) cell."""
    return text.where(text.fillna("").astype(str) != "", np.nan)


def sites_table() -> pd.DataFrame:
    return pd.DataFrame(
        [(s.name, s.currency, s.tariff_per_kwh, s.motor_efficiency, s.note) for s in SITES], columns=SITE_HEADERS
    )


def pumps_table(specs: pd.DataFrame) -> pd.DataFrame:
    """Each pump in its first position; a makers' max flow is given for piston and vane pumps only."""
    drain_default = specs["kind"].map({k: v.drain_limit_pct for k, v in DEFAULT_LIMITS.items()}).astype(float)
    lists_max_flow = specs["kind"].isin(PISTON_KINDS | {"vane"})
    machine_note = specs["machine"].map({m.name: m.note for m in MACHINES})
    note = machine_note.where(specs["pump"] != SWAP_PUMP, machine_note + "; later moved to press-2")
    note = note.where(specs["pump"] != SWAP_REPLACES, machine_note + "; later to the spares shelf")
    table = pd.DataFrame(
        {
            "pump": specs["pump"],
            "site": specs["site"],
            "machine": specs["machine"],
            "position": specs["position"],
            "kind": specs["kind"],
            "variable": yes_no(specs["variable"]),
            "displacement [cm3/rev]": specs["displacement_cc"],
            "rated_speed [rpm]": specs["rated_speed_rpm"],
            "rated_pressure [bar]": specs["rated_pressure_bar"],
            "max_flow [L/min]": specs["max_flow_lpm"].round(1).where(lists_max_flow, np.nan),
            "case_drain": yes_no(specs["case_drain"]),
            "reference_temp [degC]": specs["reference_temp_c"],
            "oil": specs["oil"],
            "oil_grade": specs["oil_grade"],
            "viscosity_40 [mm2/s]": specs["nu40_cst"],
            "viscosity_100 [mm2/s]": specs["nu100_cst"],
            "density_15 [kg/L]": specs["density15_kg_per_l"],
            "eta_v_limit": specs["eta_v_limit"],
            "drain_limit_pct": drain_default.where(specs["case_drain"], np.nan),
            "overhaul_cost": specs["overhaul_cost"],
            "installed_at": pd.to_datetime(specs["installed_at"]).dt.strftime(DATE),
            "installed_hours [h]": specs["installed_hours"],
            "note": note,
        }
    )
    return table[PUMP_HEADERS]


def installations_table(swap: dict) -> pd.DataFrame:
    return pd.DataFrame(
        [
            [
                swap["pump"],
                swap["site"],
                swap["machine"],
                swap["position"],
                swap["installed_at"].strftime(DATE),
                round(swap["hours"], 1),
            ]
        ],
        columns=INSTALLATION_HEADERS,
    )


def readings_table(readings: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "pump": readings["pump"],
            "taken_at": readings["taken_at"].dt.strftime(DATETIME),
            "hours [h]": readings["hours"].round(1),
            "outlet_pressure [bar]": readings["pressure_bar"],
            "speed [rpm]": readings["speed_rpm"],
            "outlet_flow [L/min]": readings["flow_lpm"],
            "case_drain_flow [L/min]": readings["drain_lpm"],
            "oil_temp [degC]": readings["temp_c"],
            "stroke [%]": readings["stroke_pct"],
            "taken_by": readings["taken_by"],
            "note": blank_empty(readings["note"]),
        }
    )[READING_HEADERS]


def flowtests_table(points: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "pump": points["pump"],
            "taken_at": points["taken_at"].dt.strftime(DATETIME),
            "outlet_pressure [bar]": points["pressure_bar"],
            "outlet_flow [L/min]": points["flow_lpm"],
        }
    )[FLOWTEST_HEADERS]


def samples_table(samples: pd.DataFrame) -> pd.DataFrame:
    """A sample reported as particle counts leaves iso4406 blank; one reported as a code leaves counts blank."""
    code = samples["code_4"].astype(str) + "/" + samples["code_6"].astype(str) + "/" + samples["code_14"].astype(str)
    counts = samples["as_counts"]
    return pd.DataFrame(
        {
            "site": samples["site"],
            "machine": samples["machine"],
            "sampled_at": samples["sampled_at"].dt.strftime(DATE),
            "reported_at": samples["reported_at"].dt.strftime(DATE),
            "iso4406": code.where(~counts, np.nan),
            "count_4 [1/mL]": samples["count_4"].where(counts, np.nan),
            "count_6 [1/mL]": samples["count_6"].where(counts, np.nan),
            "count_14 [1/mL]": samples["count_14"].where(counts, np.nan),
            "water [ppm]": samples["water_ppm"],
            "viscosity_40 [mm2/s]": samples["viscosity_40_cst"],
            "lab_ref": samples["lab_ref"],
        }
    )[SAMPLE_HEADERS]


def events_table(events: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "pump": events["pump"],
            "date": events["date"].dt.strftime(DATE),
            "hours [h]": events["hours"].round(1),
            "kind": events["kind"],
            "cost": events["cost"],
            "downtime [h]": events["downtime_h"],
            "failure_mode": blank_empty(events["failure_mode"]),
            "note": events["note"],
        }
    )[EVENT_HEADERS]
