"""Invented pumps and readings for the trend engine tests (all data invented; no real equipment).

The generator lives in benchmarks/wear_fleets.py (the calibration benchmark uses it too); its names are
available here as before. wearing_fleet is the tests' own fleet: exponential wear, readings covering 40-60 %
of the life to the limit.
"""

import numpy as np
import pandas as pd

from benchmarks.wear_fleets import (  # noqa: F401 (re-exported for the tests)
    DENSITY15,
    DRAIN_LIMIT_PCT,
    DRAIN_SHARE,
    ETA_LIMIT,
    NU40,
    NU100,
    RATED_PRESSURE_BAR,
    RATED_SPEED_RPM,
    REFERENCE_TEMP_C,
    START,
    Fleet,
    clean_samples,
    make_pumps,
    no_events,
    wear_readings,
)


def wearing_fleet(n_pumps: int, seed: int, n_readings: int = 52) -> Fleet:
    """Pumps wearing towards the eta_v limit; readings cover 40-60 % of the life to the limit."""
    rng = np.random.default_rng(seed)
    pumps = make_pumps(n_pumps, rng)
    eta_new = rng.uniform(0.94, 0.96, n_pumps)
    crossing = rng.uniform(7000.0, 14000.0, n_pumps)
    growth = np.log((1.0 - ETA_LIMIT) / (1.0 - eta_new)) / crossing
    covered = rng.uniform(0.4, 0.6, n_pumps)
    per_day = covered * crossing / ((n_readings - 1) * 7.0)
    readings = wear_readings(
        pumps, rng, n_readings=n_readings, eta_new=eta_new, growth_per_h=growth, hours_per_day=per_day
    )
    last_hours = readings.groupby("pump_id")["hours"].max().to_numpy()
    truth = pd.DataFrame(
        {
            "slip_ref0_lpm": (1.0 - eta_new) * pumps["max_flow_lpm"].to_numpy(),
            "growth_per_h": growth,
            "crossing_hours": crossing,
            "last_hours": last_hours,
            "remaining_hours": crossing - last_hours,
            "eta_v_ref_now": 1.0 - (1.0 - eta_new) * np.exp(growth * last_hours),
            "hours_per_day": per_day,
        },
        index=pumps["pump_id"],
    )
    now = readings["taken_at"].max() + pd.Timedelta(days=1)
    return Fleet(pumps, readings, no_events(), clean_samples(pumps, now - pd.Timedelta(days=30)), truth)
