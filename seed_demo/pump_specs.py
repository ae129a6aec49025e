"""Rated data for the invented demo pumps, drawn from catalogue-like steps per pump kind."""

import datetime as dt

import numpy as np
import pandas as pd

from fleet.kinds import PISTON_KINDS
from fleet.physics.pump import theoretical_flow_lpm
from seed_demo.layout import ETA_V_LIMIT_OVERRIDES, MACHINES, SLOTS, SWAP_PUMP, SWAP_REPLACES

# Per kind: displacement steps [cm3/rev], rated speeds [rpm], rated pressures [bar], new eta_v range at rated
# conditions, overhaul cost range. Typical industrial sizes (common practice, no source); lobe pumps are
# low-pressure transfer pumps on slow motors.
KIND_RANGES = {
    "external_gear": (
        (8, 11, 14, 16, 19, 22.5, 26, 32, 40, 50, 60),
        (1450, 1500, 1800),
        (160, 180, 200, 210, 250),
        (0.90, 0.95),
        (600, 2500),
    ),
    "internal_gear": ((16, 20, 25, 32, 40, 50), (1450, 1500, 1800), (160, 200, 250), (0.90, 0.95), (1200, 3500)),
    "gerotor": ((5, 8, 12.5, 16, 20), (1450, 1500), (40, 60, 80, 100), (0.90, 0.95), (400, 1200)),
    "lobe": ((80, 120, 160, 250), (720, 960), (8, 10, 12, 16), (0.90, 0.95), (900, 2800)),
    "vane": ((20, 28, 36, 45, 63, 80, 90), (1450, 1500, 1800), (140, 160, 175, 210), (0.90, 0.95), (1200, 3500)),
    "axial_piston": ((28, 45, 63, 71, 100, 125, 140), (1500, 1800), (280, 315, 350), (0.94, 0.97), (4000, 12000)),
    "radial_piston": ((28, 32, 40), (1500,), (315, 350), (0.94, 0.97), (3500, 9000)),
}


def has_case_drain(kind: str, variable: bool) -> bool:
    """Piston pumps and variable (unbalanced) vane pumps drain their case externally (domain.md sec. 4)."""
    return kind in PISTON_KINDS or (kind == "vane" and variable)


def draw_pump_specs(rng: np.random.Generator, end: dt.date) -> pd.DataFrame:
    """One row per pump: first position, rated data, oil, true new eta_v, install date and hours, overhaul cost.

    Columns are internal (canonical unit names); seed_demo.tables renames them to the import headers.
    """
    machines = {m.name: m for m in MACHINES}
    rows = []
    for slot in SLOTS:
        disp_steps, speeds, pressures, eta_range, cost_range = KIND_RANGES[slot.kind]
        machine = machines[slot.machine]
        installed_days_before_end = int(rng.integers(950, 2200))  # before the 2.5-year reading window
        brand_new = bool(rng.random() < 0.6)
        rows.append(
            {
                "pump": slot.pump,
                "site": machine.site,
                "machine": slot.machine,
                "position": slot.position,
                "kind": slot.kind,
                "variable": slot.variable,
                "role": slot.role,
                "displacement_cc": float(rng.choice(disp_steps)),
                "rated_speed_rpm": float(rng.choice(speeds)),
                "rated_pressure_bar": float(rng.choice(pressures)),
                "case_drain": has_case_drain(slot.kind, slot.variable),
                "reference_temp_c": machine.reference_temp_c,
                "oil": machine.oil.name,
                "oil_grade": machine.oil.grade,
                "nu40_cst": machine.oil.nu40_cst,
                "nu100_cst": machine.oil.nu100_cst,
                "density15_kg_per_l": machine.oil.density15_kg_per_l,
                "eta_v_new": float(rng.uniform(*eta_range)),
                "hours_per_day": float(rng.uniform(*machine.hours_per_day)),
                "overhaul_cost": float(np.round(rng.uniform(*cost_range) / 50.0) * 50.0),
                "installed_at": end - dt.timedelta(days=installed_days_before_end),
                "installed_hours": 0.0 if brand_new else float(np.round(rng.uniform(2000, 12000), -1)),
                "eta_v_limit": ETA_V_LIMIT_OVERRIDES.get(slot.pump, np.nan),
            }
        )
    specs = pd.DataFrame(rows)
    # The pump moved onto press-2 is the same size as the one it replaces, so it fits that position.
    same_size = ["displacement_cc", "rated_speed_rpm", "rated_pressure_bar"]
    specs.loc[specs["pump"] == SWAP_PUMP, same_size] = specs.loc[specs["pump"] == SWAP_REPLACES, same_size].values
    specs["max_flow_lpm"] = theoretical_flow_lpm(specs["displacement_cc"], specs["rated_speed_rpm"])
    return specs
