"""Invented pumps and readings with a known wear law, for the trend tests and the calibration benchmark.

All data invented; no real equipment. Readings are generated from Wilson's slip law with the oil module's
viscosity, a slip coefficient that grows with running hours by a known law (exponential unless told
otherwise), working pressures of 55-100 % of rated, oil temperatures swinging about +-20 degC around the
reference, and 0.5 % flow-meter noise. Optional disturbances (outliers, part stroke, speed swings) come on
top for the calibration benchmark.
"""

from dataclasses import dataclass

import numpy as np
import pandas as pd

from fleet.physics.leakage import wilson_slip_lpm
from fleet.physics.oil import dynamic_viscosity_pas

NU40, NU100, DENSITY15 = 46.0, 6.8, 0.87  # an invented ISO VG 46 oil (VI about 100)
RATED_SPEED_RPM = 1500.0
RATED_PRESSURE_BAR = 250.0
REFERENCE_TEMP_C = 50.0
ETA_LIMIT = 0.85
DRAIN_LIMIT_PCT = 6.0
DRAIN_SHARE = 0.3  # part of the slip that leaves through the case drain
START = pd.Timestamp("2024-01-01")


@dataclass
class Fleet:
    pumps: pd.DataFrame
    readings: pd.DataFrame
    events: pd.DataFrame
    samples: pd.DataFrame
    truth: pd.DataFrame  # per pump_id: slip_ref0_lpm, growth_per_h, crossing_hours, last_hours, eta_v_ref_now


def make_pumps(n: int, rng: np.random.Generator, first_id: int = 1) -> pd.DataFrame:
    """n invented fixed axial piston pumps with a case drain (columns as fleet.frames.PUMP_COLUMNS)."""
    ids = np.arange(first_id, first_id + n)
    vg = rng.uniform(40.0, 100.0, n).round(1)
    return pd.DataFrame(
        {
            "pump_id": ids,
            "pump": [f"TEST-{i:04d}" for i in ids],
            "kind": "axial_piston",
            "variable": False,
            "displacement_cc": vg,
            "rated_speed_rpm": RATED_SPEED_RPM,
            "rated_pressure_bar": RATED_PRESSURE_BAR,
            "max_flow_lpm": vg * RATED_SPEED_RPM / 1000.0,
            "case_drain": True,
            "reference_temp_c": REFERENCE_TEMP_C,
            "site": "Invented works",
            "machine": [f"Press {i}" for i in ids],
            "position": "main",
            "machine_id": ids,
            "eta_v_limit": ETA_LIMIT,
            "drain_limit_pct": DRAIN_LIMIT_PCT,
            "oil_temp_max_c": 80.0,
            "oil_temp_min_c": 10.0,
            "cleanliness_target": "18/16/13",
            "reading_interval_days": 14.0,
            "planning_horizon_weeks": 12.0,
            "tariff_per_kwh": 0.15,
            "motor_efficiency": 0.93,
            "currency": "EUR",
            "overhaul_cost": 4000.0,
        }
    )


@dataclass(frozen=True)
class Disturbances:
    """What real rounds add to the readings (all off by default)."""

    outlier_share: float = 0.0  # readings with a gross flow error (a misread meter, a transient)
    outlier_size: tuple[float, float] = (0.03, 0.10)  # its size, as a fraction of the flow, either sign
    part_stroke_share: float = 0.0  # variable pumps: readings at part stroke, the setting written down
    unrecorded_stroke_share: float = 0.0  # variable pumps: at part stroke, the setting not written down
    speed_swing: float = 0.0  # shaft speed uniform within +-this fraction of rated


def wear_readings(
    pumps: pd.DataFrame,
    rng: np.random.Generator,
    *,
    n_readings: int = 52,
    every_days: float | np.ndarray = 7.0,
    eta_new: np.ndarray,
    growth_per_h: np.ndarray | None = None,
    hours_per_day: np.ndarray,
    start_hours: np.ndarray | None = None,
    start: pd.Timestamp = START,
    noise: float | np.ndarray = 0.005,
    first_reading_id: int = 1,
    wear=None,
    first_interval_hours: np.ndarray | None = None,
    disturb: Disturbances | None = None,
) -> pd.DataFrame:
    """Readings of every pump (vectorised): slip coefficient C_s(h) = C_0 x wear(pump index, h), h the hours
    since the interval start, by default wear = exp(growth h). every_days and noise may be per pump.

    start_hours: the hour meter at the interval start (default 0); first_interval_hours: interval hours at the
    first reading (default 0: the first reading is taken at the interval start).
    """
    n_p = len(pumps)
    vg = pumps["displacement_cc"].to_numpy(float)
    rated_flow = vg * RATED_SPEED_RPM / 1000.0
    mu_ref = dynamic_viscosity_pas(REFERENCE_TEMP_C, NU40, NU100, DENSITY15)
    # C_0 such that the referred slip at h = 0 is (1 - eta_new) x rated flow (Wilson slip is linear in C_s).
    c0 = (1.0 - eta_new) * rated_flow / wilson_slip_lpm(1.0, vg, RATED_PRESSURE_BAR, mu_ref)

    every = np.broadcast_to(np.asarray(every_days, dtype=float), (n_p,))
    day = (np.arange(n_readings)[None, :] * every[:, None]).ravel()
    pump_idx = np.repeat(np.arange(n_p), n_readings)
    first_h = np.zeros(n_p) if first_interval_hours is None else np.asarray(first_interval_hours, dtype=float)
    h_interval = first_h[pump_idx] + day * np.asarray(hours_per_day)[pump_idx]
    h0 = np.zeros(n_p) if start_hours is None else np.asarray(start_hours, dtype=float)
    size = n_p * n_readings
    season = np.sin(2 * np.pi * day / 365.0 + rng.uniform(0, 2 * np.pi, n_p)[pump_idx])
    temp = REFERENCE_TEMP_C + 14.0 * season + rng.uniform(-6.0, 6.0, size)  # within +-20 degC
    pressure = RATED_PRESSURE_BAR * rng.uniform(0.55, 1.0, size)
    speed = RATED_SPEED_RPM * (1.0 + rng.normal(0.0, 0.01, size))
    flow_noise = rng.standard_normal(size)
    drain_noise = rng.standard_normal(size)
    stroke = np.full(size, np.nan)
    written = np.ones(size, dtype=bool)
    if disturb is not None:
        speed = speed * (1.0 + rng.uniform(-disturb.speed_swing, disturb.speed_swing, size))
        variable = pumps["variable"].to_numpy(bool)[pump_idx]
        stroke = np.where(variable, 1.0, np.nan)
        part = variable & (rng.random(size) < disturb.part_stroke_share + disturb.unrecorded_stroke_share)
        stroke = np.where(part, rng.uniform(0.5, 0.95, size), stroke)
        written = ~(part & (rng.random(size) < disturb.unrecorded_stroke_share /
                            max(disturb.part_stroke_share + disturb.unrecorded_stroke_share, 1e-12)))
        size_ = rng.uniform(*disturb.outlier_size, size) * rng.choice([-1.0, 1.0], size)
        outlier = np.where(rng.random(size) < disturb.outlier_share, size_, 0.0)
    mu = dynamic_viscosity_pas(temp, NU40, NU100, DENSITY15)
    shape = (np.exp(np.asarray(growth_per_h)[pump_idx] * h_interval) if wear is None
             else wear(pump_idx, h_interval))
    c_s = c0[pump_idx] * shape
    slip = wilson_slip_lpm(c_s, vg[pump_idx], pressure, mu)
    flow_true = vg[pump_idx] * speed * np.nan_to_num(stroke, nan=1.0) / 1000.0 - slip
    flow = flow_true * (1.0 + np.broadcast_to(np.asarray(noise, dtype=float), (n_p,))[pump_idx] * flow_noise)
    if disturb is not None:
        flow = flow * (1.0 + outlier)
    drain = DRAIN_SHARE * slip * (1.0 + 0.02 * drain_noise)
    return pd.DataFrame(
        {
            "reading_id": np.arange(first_reading_id, first_reading_id + size),
            "pump_id": pumps["pump_id"].to_numpy()[pump_idx],
            "taken_at": start + pd.to_timedelta(day, unit="D") + pd.Timedelta(hours=9),
            "hours": (h0[pump_idx] + h_interval).round(1),
            "pressure_bar": pressure.round(1),
            "speed_rpm": speed.round(0),
            "flow_lpm": flow,
            "drain_lpm": np.where(pumps["case_drain"].to_numpy(bool)[pump_idx], drain, np.nan),
            "temp_c": temp.round(1),
            "stroke": np.where(written, stroke, np.nan),
            "nu40": NU40,
            "nu100": NU100,
            "density15": DENSITY15,
        }
    )


def clean_samples(pumps: pd.DataFrame, sampled_at: pd.Timestamp) -> pd.DataFrame:
    n = len(pumps)
    return pd.DataFrame(
        {
            "machine_id": pumps["machine_id"].to_numpy(),
            "sampled_at": sampled_at,
            "reported_at": sampled_at + pd.Timedelta(days=7),
            "code_4": 17.0,
            "code_6": 15.0,
            "code_14": 12.0,
            "low_count": False,
            "water_ppm": np.full(n, 120.0),
            "viscosity_40": 46.0,
        }
    )


def no_events() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "pump_id": pd.Series(dtype=np.int64),
            "date": pd.Series(dtype="datetime64[ns]"),
            "hours": pd.Series(dtype=float),
            "kind": pd.Series(dtype=object),
            "cost": pd.Series(dtype=float),
        }
    )
