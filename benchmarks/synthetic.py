"""An invented fleet for the benchmark, built with numpy straight into import CSV files.

All data is invented: site, machine, oil and pump names are made up, and the readings come from Wilson's slip
law (slip grows exponentially with running hours, an overhaul resets it) with meter noise. Nothing depicts real
equipment.
"""

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from fleet.physics.leakage import wilson_slip_lpm
from fleet.physics.oil import dynamic_viscosity_pas

START = pd.Timestamp("2021-01-04 08:00")
PUMPS_PER_MACHINE = 4
MACHINES_PER_SITE = 250
# Invented oils: (name, ISO VG, nu40, nu100, density15).
OILS = (("Invented HM 32", 32, 32.0, 5.4, 0.87), ("Invented HM 46", 46, 46.0, 6.8, 0.87),
        ("Invented HV 68", 68, 68.0, 10.5, 0.88))
KINDS = ("external_gear", "vane", "axial_piston", "internal_gear", "radial_piston")
REFERENCE_TEMP_C = 50.0
RATED_SPEED_RPM = 1500.0


@dataclass(frozen=True)
class FleetSize:
    pumps: int
    readings_per_pump: int
    pumps_per_file: int  # readings are split into files of this many pumps (one import each)


SIZES = {
    "small": FleetSize(pumps=40, readings_per_pump=60, pumps_per_file=20),
    "medium": FleetSize(pumps=1_000, readings_per_pump=520, pumps_per_file=1_000),  # one file of the full size's
    "full": FleetSize(pumps=10_000, readings_per_pump=520, pumps_per_file=1_000),
    # Five times the pumps of "full" with a fifth of the readings each (one every 17.5 days): the same 5.2 million
    # readings, so what grows is the work per pump (run by hand, README "Performance").
    "wide": FleetSize(pumps=50_000, readings_per_pump=104, pumps_per_file=5_000),
}


@dataclass
class FleetFiles:
    sites: Path
    pumps: Path
    readings: list[Path]
    events: Path
    samples: Path
    n_readings: int
    last_reading_at: pd.Timestamp


def _serials(n: int) -> np.ndarray:
    return np.char.add("BX-", np.char.zfill(np.arange(1, n + 1).astype(str), 5))


def write_fleet(folder: Path, size: FleetSize, seed: int = 6) -> FleetFiles:
    """Write sites, pumps, readings (several files), events and samples CSVs for ``size``; invented data."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    n = size.pumps
    serial = _serials(n)
    machine_no = np.arange(n) // PUMPS_PER_MACHINE
    site_no = machine_no // MACHINES_PER_SITE
    n_sites = int(site_no.max()) + 1
    oil_of_machine = rng.integers(0, len(OILS), int(machine_no.max()) + 1)
    oil = oil_of_machine[machine_no]
    kind = rng.integers(0, len(KINDS), n)
    kinds = np.asarray(KINDS)[kind]
    piston = np.isin(kinds, ["axial_piston", "radial_piston"])
    vg = rng.uniform(16.0, 120.0, n).round(1)
    rated_p = np.where(piston, 280.0, rng.choice([160.0, 210.0, 250.0], n))

    sites = pd.DataFrame({"site": [f"Invented site {i + 1}" for i in range(n_sites)], "currency": "EUR",
                          "tariff_per_kwh": 0.15, "motor_efficiency": 0.93})
    sites.to_csv(folder / "sites.csv", index=False)

    oils = [OILS[i] for i in oil]
    pumps = pd.DataFrame({
        "pump": serial,
        "site": [f"Invented site {s + 1}" for s in site_no],
        "machine": [f"Unit {m + 1:04d}" for m in machine_no],
        "position": [f"P{p + 1}" for p in np.arange(n) % PUMPS_PER_MACHINE],
        "kind": kinds,
        "displacement": vg,
        "rated_speed": RATED_SPEED_RPM,
        "rated_pressure": rated_p,
        "case_drain": np.where(piston, "yes", "no"),
        "oil": [o[0] for o in oils],
        "oil_grade": [o[1] for o in oils],
        "viscosity_40": [o[2] for o in oils],
        "viscosity_100": [o[3] for o in oils],
        "density_15": [o[4] for o in oils],
        "installed_at": (START - pd.Timedelta(days=1)).strftime("%Y-%m-%d"),
        "installed_hours": 0,
        "overhaul_cost": rng.choice([2500, 4000, 9000], n),
    })
    pumps.to_csv(folder / "pumps.csv", index=False)

    # Wear: the referred slip starts at (1 - eta_new) of rated flow and grows exponentially with hours; about a
    # third of the pumps are overhauled once, half way, which resets the slip.
    k = size.readings_per_pump
    every_days = 5 * 365.0 / k
    hours_per_day = rng.uniform(6.0, 22.0, n)
    eta_new = rng.uniform(0.93, 0.97, n)
    # Hours to the eta_v limit: from 0.7 to 3 times what a pump runs in the five years (some end past it).
    crossing = rng.uniform(0.7, 3.0, n) * 5 * 365.0 * hours_per_day
    growth = np.log(0.18 / (1.0 - eta_new)) / crossing
    overhauled = rng.random(n) < 0.33
    overhaul_at = np.where(overhauled, k // 2, k + 1)

    day = np.tile(np.arange(k) * every_days, n)
    idx = np.repeat(np.arange(n), k)
    step = np.tile(np.arange(k), n)
    hours = (day * hours_per_day[idx]).round(1)
    overhaul_hours = (overhaul_at * every_days * hours_per_day - 0.5 * every_days * hours_per_day)
    since = np.where(step >= overhaul_at[idx], hours - overhaul_hours[idx], hours)
    size_all = n * k
    nu40 = np.array([o[2] for o in OILS])[oil][idx]
    nu100 = np.array([o[3] for o in OILS])[oil][idx]
    rho = np.array([o[4] for o in OILS])[oil][idx]
    temp = REFERENCE_TEMP_C + 12.0 * np.sin(2 * np.pi * day / 365.0) + rng.uniform(-6.0, 6.0, size_all)
    pressure = rated_p[idx] * rng.uniform(0.55, 1.0, size_all)
    speed = RATED_SPEED_RPM * (1.0 + rng.normal(0.0, 0.01, size_all))
    mu = dynamic_viscosity_pas(temp, nu40, nu100, rho)
    mu_ref = dynamic_viscosity_pas(REFERENCE_TEMP_C, nu40, nu100, rho)
    rated_flow = vg * RATED_SPEED_RPM / 1000.0
    c0 = (1.0 - eta_new[idx]) * rated_flow[idx] / wilson_slip_lpm(1.0, vg[idx], rated_p[idx], mu_ref)
    slip = wilson_slip_lpm(c0 * np.exp(growth[idx] * since), vg[idx], pressure, mu)
    flow = (vg[idx] * speed / 1000.0 - slip) * (1.0 + 0.005 * rng.standard_normal(size_all))
    drain = np.where(piston[idx], 0.3 * slip * (1.0 + 0.02 * rng.standard_normal(size_all)), np.nan)
    taken_at = START + pd.to_timedelta(np.round(day * 24.0 * 60.0), unit="min")

    readings = pd.DataFrame({
        "pump": serial[idx],
        "taken_at": taken_at.strftime("%Y-%m-%d %H:%M"),
        "hours": hours,
        "outlet_pressure": pressure.round(1),
        "speed": speed.round(0),
        "outlet_flow": flow.round(3),
        "case_drain_flow": drain.round(3),
        "oil_temp": temp.round(1),
    })
    paths = []
    rows_per_file = size.pumps_per_file * k
    for part, first in enumerate(range(0, size_all, rows_per_file)):
        path = folder / f"readings_{part + 1:02d}.csv"
        readings.iloc[first:first + rows_per_file].to_csv(path, index=False)
        paths.append(path)

    o = np.flatnonzero(overhauled)
    events_at = START + pd.to_timedelta((overhaul_at[o] - 0.5) * every_days, unit="D")
    events = pd.DataFrame({"pump": serial[o], "date": events_at.strftime("%Y-%m-%d"),
                           "hours": overhaul_hours[o].round(1), "kind": "overhaul", "cost": 4000,
                           "failure_mode": "internal_leakage"})
    filters = pd.DataFrame({"pump": serial, "date": (START + pd.Timedelta(days=400)).strftime("%Y-%m-%d"),
                            "hours": (400 * hours_per_day).round(1), "kind": "filter_change", "cost": 150,
                            "failure_mode": ""})
    pd.concat([events, filters]).to_csv(folder / "events.csv", index=False)

    # Oil samples: each reservoir twice a year, the last one still at the lab.
    n_machines = int(machine_no.max()) + 1
    rounds = np.arange(0, 5 * 365, 182)
    m = np.repeat(np.arange(n_machines), len(rounds))
    sampled = START + pd.to_timedelta(np.tile(rounds, n_machines), unit="D")
    reported = (sampled + pd.Timedelta(days=9)).strftime("%Y-%m-%d")
    reported = np.where(np.tile(rounds == rounds[-1], n_machines), "", reported)
    c6 = rng.integers(14, 18, len(m))
    samples = pd.DataFrame({
        "site": [f"Invented site {s + 1}" for s in m // MACHINES_PER_SITE],
        "machine": [f"Unit {i + 1:04d}" for i in m],
        "sampled_at": sampled.strftime("%Y-%m-%d"),
        "reported_at": reported,
        "iso4406": [f"{c + 2}/{c}/{c - 3}" for c in c6],
        "water": rng.integers(60, 400, len(m)),
        "lab_ref": [f"LAB-{i:06d}" for i in range(len(m))],
    })
    samples.to_csv(folder / "samples.csv", index=False)
    return FleetFiles(folder / "sites.csv", folder / "pumps.csv", paths, folder / "events.csv",
                      folder / "samples.csv", size_all, pd.Timestamp(taken_at.max()))
