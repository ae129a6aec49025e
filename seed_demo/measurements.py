"""What the technician reads on each visit, made with the project's physics (domain.md sec. 4).

Outlet flow = geometric flow at the displacement setting minus Wilson slip at the working pressure and oil
viscosity; the slip does not shrink with stroke (it behaves like a fixed orifice). Case drain is a share of
the slip. Every reading also keeps its noise-free truth so tests can check the physics end to end.
"""

import numpy as np
import pandas as pd

from fleet.physics.leakage import wilson_eta_v, wilson_slip_lpm
from fleet.physics.oil import dynamic_viscosity_pas
from fleet.physics.pump import theoretical_flow_lpm
from seed_demo.layout import DRAIN_JUMP_PUMP, MACHINES, TECHNICIANS
from seed_demo.wear import reference_viscosity_pas, slip_coefficient

FLOW_NOISE = 0.005  # flow meter, 0.5 % of reading (one standard deviation)
DRAIN_NOISE = 0.03  # small drain flows read on a cylinder and stopwatch
FLOW_MISSING_SHARE = 0.06  # flow meter not fitted on that visit
PART_STROKE_SHARE = 0.25  # variable pumps found below full stroke
FLOWTEST_PUMPS = ("EY-201", "RS-502", "EY-403", "EY-303")
FLOWTEST_VISIT_QUANTILES = (0.25, 0.6, 0.97)
FLOWTEST_PRESSURE_SHARES = (0.3, 0.6, 0.9)

# Bulk oil around 48 degC through the year, warmest in late July (day 201), plus machine and duty.
SEASON_MEAN_C = 48.0
SEASON_AMPLITUDE_C = 8.0
SEASON_PEAK_DAY = 201
DUTY_TEMP_C = 4.0  # at full pressure over a typical 77.5 % load
TEMP_NOISE_C = 1.5


def machine_column(machine_names: pd.Series, attribute: str) -> np.ndarray:
    """A machine (or its oil's) attribute per row, e.g. 'temp_offset_c' or 'oil.nu40_cst'."""
    lookup = {}
    for m in MACHINES:
        value = m
        for part in attribute.split("."):
            value = getattr(value, part)
        lookup[m.name] = value
    return machine_names.map(lookup).to_numpy()


def pick_flowtest_visits(visits: pd.DataFrame) -> np.ndarray:
    """Boolean mask of visits on which a multi-point flow test was also run (a few visits of a few pumps)."""
    chosen = np.zeros(len(visits), dtype=bool)
    for pump in FLOWTEST_PUMPS:
        rows = np.flatnonzero(visits["pump"].to_numpy() == pump)
        picks = np.floor(np.asarray(FLOWTEST_VISIT_QUANTILES) * (len(rows) - 1)).astype(int)
        chosen[rows[picks]] = True
    return chosen


def operating_points(rng: np.random.Generator, visits: pd.DataFrame, specs: pd.DataFrame) -> pd.DataFrame:
    """Pressure, speed, oil temperature and stroke at each visit, rounded as a gauge would be read."""
    spec = specs.iloc[visits["pump_index"].to_numpy()]
    n = len(visits)
    rated_p = spec["rated_pressure_bar"].to_numpy()
    load = rng.uniform(0.55, 1.0, n)
    pressure = np.round(load * rated_p * 2.0) / 2.0
    speed = np.round(spec["rated_speed_rpm"].to_numpy() * (1.0 - rng.uniform(0.003, 0.02, n)))
    day_of_year = visits["taken_at"].dt.day_of_year.to_numpy()
    season = SEASON_AMPLITUDE_C * np.cos(2.0 * np.pi * (day_of_year - SEASON_PEAK_DAY) / 365.25)
    temp = (
        SEASON_MEAN_C
        + season
        + machine_column(visits["machine"], "temp_offset_c")
        + DUTY_TEMP_C * (load - 0.775) / 0.225
        + rng.normal(0.0, TEMP_NOISE_C, n)
    )
    variable = spec["variable"].to_numpy(dtype=bool)
    part = rng.random(n) < PART_STROKE_SHARE
    stroke = np.where(variable, np.where(part, np.round(rng.uniform(60, 95, n)), 100.0), np.nan)
    return pd.DataFrame(
        {"pressure_bar": pressure, "speed_rpm": speed, "temp_c": np.round(temp, 1), "stroke_pct": stroke}
    )


def true_flows(
    specs: pd.DataFrame,
    wear: pd.DataFrame,
    pump_index,
    hours,
    machine: pd.Series,
    pressure_bar,
    speed_rpm,
    temp_c,
    stroke_pct,
) -> pd.DataFrame:
    """Noise-free outlet flow, slip and the true referred eta_v for each point (arrays of equal length)."""
    spec = specs.iloc[np.asarray(pump_index, dtype=int)]
    mu = np.asarray(
        dynamic_viscosity_pas(
            temp_c,
            machine_column(machine, "oil.nu40_cst").astype(float),
            machine_column(machine, "oil.nu100_cst").astype(float),
            machine_column(machine, "oil.density15_kg_per_l").astype(float),
        )
    )
    cs = slip_coefficient(wear, pump_index, np.asarray(hours, dtype=float))
    displacement = spec["displacement_cc"].to_numpy()
    stroke_fraction = np.where(np.isnan(stroke_pct), 100.0, stroke_pct) / 100.0
    theoretical = np.asarray(theoretical_flow_lpm(displacement, speed_rpm, stroke_fraction))
    slip = np.asarray(wilson_slip_lpm(cs, displacement, pressure_bar, mu))
    eta_ref = np.asarray(
        wilson_eta_v(
            cs, spec["rated_pressure_bar"].to_numpy(), reference_viscosity_pas(spec), spec["rated_speed_rpm"].to_numpy()
        )
    )
    return pd.DataFrame(
        {
            "mu_pas": mu,
            "slip_coefficient": cs,
            "theoretical_lpm": theoretical,
            "slip_lpm": slip,
            "flow_true_lpm": theoretical - slip,
            "eta_v_ref_true": eta_ref,
        }
    )


def take_readings(
    rng: np.random.Generator,
    visits: pd.DataFrame,
    specs: pd.DataFrame,
    wear: pd.DataFrame,
    hours: np.ndarray,
    flowtest_visit: np.ndarray,
    end_day: pd.Timestamp,
) -> pd.DataFrame:
    """All readings with their measured values and, in *_true / truth columns, what the generator knows."""
    n = len(visits)
    points = operating_points(rng, visits, specs)
    points.loc[flowtest_visit & ~np.isnan(points["stroke_pct"].to_numpy()), "stroke_pct"] = 100.0
    truth = true_flows(
        specs,
        wear,
        visits["pump_index"],
        hours,
        visits["machine"],
        points["pressure_bar"].to_numpy(),
        points["speed_rpm"].to_numpy(),
        points["temp_c"].to_numpy(),
        points["stroke_pct"].to_numpy(),
    )
    spec = specs.iloc[visits["pump_index"].to_numpy()]

    flow = truth["flow_true_lpm"].to_numpy() * (1.0 + rng.normal(0.0, FLOW_NOISE, n))
    flow_missing = (rng.random(n) < FLOW_MISSING_SHARE) & ~flowtest_visit
    drain_share = rng.uniform(0.35, 0.6, len(specs))[visits["pump_index"].to_numpy()]
    drain_jump = (visits["pump"].to_numpy() == DRAIN_JUMP_PUMP) & (visits["round_day"] == end_day).to_numpy()
    drain_true = drain_share * truth["slip_lpm"].to_numpy() * np.where(drain_jump, 2.0, 1.0)
    drain = drain_true * (1.0 + rng.normal(0.0, DRAIN_NOISE, n))
    has_drain = spec["case_drain"].to_numpy(dtype=bool)
    taken_by = np.asarray(TECHNICIANS)[rng.integers(0, len(TECHNICIANS), n)]
    note = np.select(
        [flowtest_visit, flow_missing, drain_jump, points["temp_c"].to_numpy() >= 75.0],
        ["multi-point flow test", "no flow meter on this visit", "case drain line warmer than usual", "oil hot"],
        "",
    )

    return pd.concat(
        [
            visits[["pump", "pump_index", "machine", "taken_at", "round_day"]].reset_index(drop=True),
            pd.DataFrame({"hours": hours}),
            points,
            pd.DataFrame(
                {
                    "flow_lpm": np.where(flow_missing, np.nan, np.round(flow, 2)),
                    "drain_lpm": np.where(has_drain, np.round(drain, 3), np.nan),
                    "drain_true_lpm": np.where(has_drain, drain_true, np.nan),
                    "taken_by": taken_by,
                    "note": note,
                    "flowtest": flowtest_visit,
                }
            ),
            truth,
        ],
        axis=1,
    )


def flowtest_points(rng: np.random.Generator, readings: pd.DataFrame, specs: pd.DataFrame, wear: pd.DataFrame):
    """Extra pressure/flow points of each multi-point flow test, at the visit's speed and oil temperature."""
    tests = readings[readings["flowtest"]]
    shares = np.asarray(FLOWTEST_PRESSURE_SHARES)
    rep = np.repeat(np.arange(len(tests)), len(shares))
    base = tests.iloc[rep].reset_index(drop=True)
    rated_p = specs.iloc[base["pump_index"].to_numpy()]["rated_pressure_bar"].to_numpy()
    pressure = np.round(np.tile(shares, len(tests)) * rated_p * 2.0) / 2.0
    truth = true_flows(
        specs,
        wear,
        base["pump_index"],
        base["hours"].to_numpy(),
        base["machine"],
        pressure,
        base["speed_rpm"].to_numpy(),
        base["temp_c"].to_numpy(),
        base["stroke_pct"].to_numpy(),
    )
    flow = truth["flow_true_lpm"].to_numpy() * (1.0 + rng.normal(0.0, FLOW_NOISE, len(base)))
    return pd.DataFrame(
        {
            "pump": base["pump"],
            "pump_index": base["pump_index"],
            "taken_at": base["taken_at"],
            "pressure_bar": pressure,
            "flow_lpm": np.round(flow, 2),
            "flow_true_lpm": truth["flow_true_lpm"],
            "theoretical_lpm": truth["theoretical_lpm"],
        }
    )
