"""True wear of the demo pumps: Wilson slip coefficient growing exponentially with running hours.

Leakage grows with the cube of the gap, so the slip coefficient is modelled as C_s = C_s,new * exp(rate * h)
over a service interval (domain.md sec. 5); an overhaul resets it to near new. Each pump's rate is set from
its scenario role so that by the end most pumps are healthy, a few sit near their limit and a few are past it.
"""

import numpy as np
import pandas as pd

from fleet.limits import DEFAULT_LIMITS
from fleet.physics.leakage import wilson_eta_v
from fleet.physics.oil import dynamic_viscosity_pas

# A rebuilt pump with new parts and flushed oil wears more slowly than it did before (invented scenario figure).
POST_OVERHAUL_RATE_FACTOR = 0.5


def effective_eta_v_limit(specs: pd.DataFrame) -> np.ndarray:
    """The pump's own eta_v limit where given, else its kind's default (fleet.limits)."""
    kind_default = specs["kind"].map({k: v.eta_v_limit for k, v in DEFAULT_LIMITS.items()}).to_numpy(dtype=float)
    return np.where(specs["eta_v_limit"].isna(), kind_default, specs["eta_v_limit"].to_numpy(dtype=float))


def reference_viscosity_pas(specs: pd.DataFrame) -> np.ndarray:
    """Dynamic viscosity of the pump's oil at its reference temperature."""
    return np.asarray(
        dynamic_viscosity_pas(
            specs["reference_temp_c"].to_numpy(),
            specs["nu40_cst"].to_numpy(),
            specs["nu100_cst"].to_numpy(),
            specs["density15_kg_per_l"].to_numpy(),
        )
    )


def slip_coefficient_for_eta_v(eta_v, rated_pressure_bar, mu_ref_pas, rated_speed_rpm) -> np.ndarray:
    """C_s that gives eta_v at rated pressure, rated speed and reference viscosity (Wilson: linear in C_s)."""
    eta_of_unit_cs = np.asarray(wilson_eta_v(1.0, rated_pressure_bar, mu_ref_pas, rated_speed_rpm))
    return (1.0 - np.asarray(eta_v, dtype=float)) / (1.0 - eta_of_unit_cs)


def draw_wear(
    rng: np.random.Generator, specs: pd.DataFrame, hours_at_end: np.ndarray, overhaul_hours: np.ndarray
) -> pd.DataFrame:
    """Per pump: new slip coefficient, growth rate per hour, and the reset after an overhaul (NaN hours if none).

    hours_at_end is the meter at the last round; overhaul_hours the meter at the overhaul (NaN for most pumps).
    """
    eta_new = specs["eta_v_new"].to_numpy()
    limit = effective_eta_v_limit(specs)
    role = specs["role"].to_numpy()
    n = len(specs)
    healthy_drop = rng.uniform(0.005, 0.035, n)
    near_margin = rng.uniform(0.005, 0.015, n)
    past_margin = rng.uniform(0.01, 0.03, n)
    overhaul_margin = rng.uniform(0.005, 0.02, n)
    reset_factor = rng.uniform(1.0, 1.1, n)

    healthy_end = np.maximum(eta_new - healthy_drop, np.minimum(limit + 0.03, eta_new - 0.005))
    eta_target = np.select(
        [role == "near_limit", role == "past_limit", role == "overhauled"],
        [limit + near_margin, limit - past_margin, limit - overhaul_margin],
        healthy_end,
    )
    # Overhauled pumps reach the target at the overhaul; the others at the last round.
    target_hours = np.where(role == "overhauled", overhaul_hours, hours_at_end)
    hours_run = target_hours - specs["installed_hours"].to_numpy()
    rate_per_h = np.log((1.0 - eta_target) / (1.0 - eta_new)) / hours_run

    cs_new = slip_coefficient_for_eta_v(
        eta_new,
        specs["rated_pressure_bar"].to_numpy(),
        reference_viscosity_pas(specs),
        specs["rated_speed_rpm"].to_numpy(),
    )
    return pd.DataFrame(
        {
            "pump": specs["pump"],
            "slip_coefficient_new": cs_new,
            "wear_rate_per_h": rate_per_h,
            "wear_rate_after_overhaul_per_h": rate_per_h * POST_OVERHAUL_RATE_FACTOR,
            "interval_start_hours": specs["installed_hours"].to_numpy(dtype=float),
            "overhaul_hours": overhaul_hours,
            "overhaul_reset_factor": np.where(np.isnan(overhaul_hours), np.nan, reset_factor),
            "eta_v_limit": limit,
            "eta_v_target": eta_target,
        }
    )


def slip_coefficient(wear: pd.DataFrame, pump_index: np.ndarray, hours: np.ndarray) -> np.ndarray:
    """True slip coefficient of each pump at each hour-meter reading (pump_index selects rows of wear)."""
    row = wear.iloc[np.asarray(pump_index, dtype=int)]
    cs_new = row["slip_coefficient_new"].to_numpy()
    overhaul_h = row["overhaul_hours"].to_numpy()
    after_overhaul = ~np.isnan(overhaul_h) & (hours >= np.nan_to_num(overhaul_h, nan=np.inf))
    rate = np.where(after_overhaul, row["wear_rate_after_overhaul_per_h"], row["wear_rate_per_h"])
    start = np.where(after_overhaul, overhaul_h, row["interval_start_hours"].to_numpy())
    scale = np.where(after_overhaul, row["overhaul_reset_factor"].to_numpy(), 1.0)
    return cs_new * scale * np.exp(rate * (hours - start))
