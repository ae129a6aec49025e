"""What internal leakage costs in electricity, and how fast an overhaul pays for itself.

Every function broadcasts over numpy arrays; invalid inputs give NaN, never a warning.
"""

import numpy as np

from fleet.physics.arrays import scalar_or_array


def leakage_cost_per_year(loss_kw, motor_efficiency, hours_per_year, tariff_per_kwh):
    """Yearly electricity cost of a hydraulic power loss, in the tariff's currency.

    The motor draws loss / eta_motor from the grid for every running hour.
    NaN where eta_motor is not in (0, 1].
    """
    eta = np.asarray(motor_efficiency, dtype=float)
    eta = np.where((eta > 0.0) & (eta <= 1.0), eta, np.nan)
    grid_kw = np.asarray(loss_kw, dtype=float) / eta
    return scalar_or_array(grid_kw * np.asarray(hours_per_year, dtype=float) * np.asarray(tariff_per_kwh, dtype=float))


def overhaul_payback_years(overhaul_cost, saving_per_year):
    """Years for the yearly saving to repay an overhaul; NaN where there is no saving (<= 0)."""
    saving = np.asarray(saving_per_year, dtype=float)
    saving = np.where(saving > 0.0, saving, np.nan)
    return scalar_or_array(np.asarray(overhaul_cost, dtype=float) / saving)
