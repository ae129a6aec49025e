"""What each pump's internal leakage costs now, and what an overhaul would save.

The fitted referred slip (at rated pressure and reference temperature) is scaled back to the pump's typical
working pressure, still at reference temperature: laminar leakage is proportional to pressure. The lost
hydraulic power becomes heat in the oil and is paid for through the motor.
"""

import numpy as np

from fleet.physics.energy import leakage_cost_per_year, overhaul_payback_years
from fleet.physics.leakage import leakage_power_kw
from fleet.trend.grouped import group_median, within_days_of_last

HOURS_PER_YEAR_DAYS = 365.0

def typical_pressure_bar(group: np.ndarray, taken: np.ndarray, pressure_bar: np.ndarray, usable: np.ndarray,
                         n_groups: int, window_days: float) -> np.ndarray:
    """Median working pressure of the usable readings of the last `window_days` of each pump interval (readings'
    group codes 0..n_groups-1; NaN for an interval without one)."""
    g, t, p = group[usable], taken[usable], pressure_bar[usable]
    recent = within_days_of_last(g, t, n_groups, window_days)
    return group_median(g[recent], p[recent], n_groups)


def leakage_energy(
    slip_ref_now_lpm,
    slip_ref_start_lpm,
    rated_pressure_bar,
    working_pressure_bar,
    hours_per_day,
    motor_efficiency,
    tariff_per_kwh,
    overhaul_cost,
) -> dict[str, np.ndarray]:
    """Leakage power now (kW) at the working pressure, its yearly cost, the saving of an overhaul and its payback,
    as arrays by name.

    slip_ref_start_lpm: the fitted slip at the interval start (e^a), taken as what an overhaul restores.
    """
    p_work = np.asarray(working_pressure_bar, dtype=float)
    p_rated = np.asarray(rated_pressure_bar, dtype=float)
    ok = p_rated > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.where(ok, p_work / np.where(ok, p_rated, 1.0), np.nan)
    loss_now = np.asarray(leakage_power_kw(p_work, np.asarray(slip_ref_now_lpm, dtype=float) * scale), dtype=float)
    loss_new = np.asarray(leakage_power_kw(p_work, np.asarray(slip_ref_start_lpm, dtype=float) * scale), dtype=float)
    hours_per_year = np.asarray(hours_per_day, dtype=float) * HOURS_PER_YEAR_DAYS
    cost_now = np.asarray(
        leakage_cost_per_year(loss_now, motor_efficiency, hours_per_year, tariff_per_kwh), dtype=float
    )
    cost_new = np.asarray(
        leakage_cost_per_year(loss_new, motor_efficiency, hours_per_year, tariff_per_kwh), dtype=float
    )
    saving = cost_now - cost_new
    return {
        "typical_pressure_bar": p_work,
        "leakage_kw": loss_now,
        "energy_cost_per_year": cost_now,
        "energy_cost_new_per_year": cost_new,
        "overhaul_saving_per_year": saving,
        "overhaul_payback_years": np.asarray(overhaul_payback_years(overhaul_cost, saving), dtype=float),
    }
