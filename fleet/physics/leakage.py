"""Internal leakage: laminar gap flow, Wilson's slip model, and referring a leak to reference conditions.

Leakage through a pump's clearances is laminar, so it grows with pressure and falls with viscosity. That is
what lets a reading taken hot or at low pressure be referred to the pump's rated pressure and reference
temperature before it is trended. Every function broadcasts over numpy arrays; invalid inputs give NaN.
"""

import numpy as np

from fleet.physics.arrays import scalar_or_array
from fleet.physics.pump import hydraulic_power_kw

PA_PER_BAR = 1.0e5
LPM_PER_M3S = 60_000.0


def _positive_or_nan(values):
    arr = np.asarray(values, dtype=float)
    return np.where(arr > 0.0, arr, np.nan)


def slot_leakage_lpm(width_m, gap_m, length_m, dp_bar, mu_pas):
    """Laminar flow in L/min through a parallel slit: b h^3 dp / (12 mu L) (plane Poiseuille flow).

    width_m b across the flow, gap_m h the clearance, length_m L along the flow; NaN where L or mu <= 0.
    """
    b = np.asarray(width_m, dtype=float)
    h = np.asarray(gap_m, dtype=float)
    dp_pa = np.asarray(dp_bar, dtype=float) * PA_PER_BAR
    q_m3s = b * h**3 * dp_pa / (12.0 * _positive_or_nan(mu_pas) * _positive_or_nan(length_m))
    return scalar_or_array(q_m3s * LPM_PER_M3S)


def wilson_slip_lpm(slip_coefficient, displacement_cc, dp_bar, mu_pas):
    """Slip flow in L/min by Wilson's model, Q_s = C_s D dp / mu, D = V_g / (2 pi) per radian.

    C_s is dimensionless (SI units throughout), a property of the pump's clearances. NaN where mu <= 0.
    """
    d_m3_per_rad = np.asarray(displacement_cc, dtype=float) * 1.0e-6 / (2.0 * np.pi)
    dp_pa = np.asarray(dp_bar, dtype=float) * PA_PER_BAR
    q_m3s = np.asarray(slip_coefficient, dtype=float) * d_m3_per_rad * dp_pa / _positive_or_nan(mu_pas)
    return scalar_or_array(q_m3s * LPM_PER_M3S)


def wilson_eta_v(slip_coefficient, dp_bar, mu_pas, speed_rpm):
    """Volumetric efficiency by Wilson's model, 1 - C_s dp / (mu omega); NaN where mu or speed <= 0."""
    omega_rad_s = _positive_or_nan(speed_rpm) * 2.0 * np.pi / 60.0
    dp_pa = np.asarray(dp_bar, dtype=float) * PA_PER_BAR
    c_s = np.asarray(slip_coefficient, dtype=float)
    return scalar_or_array(1.0 - c_s * dp_pa / (_positive_or_nan(mu_pas) * omega_rad_s))


def referral_factor(pressure_bar, rated_pressure_bar, mu_pas, mu_ref_pas):
    """Multiplier taking a slip or case drain flow measured at (p, mu) to reference (p_r, mu_ref).

    (p_r / p) * (mu / mu_ref): laminar leakage is proportional to pressure and inversely to viscosity.
    NaN where p <= 0 or mu_ref <= 0 (nothing to scale from).
    """
    p_r = np.asarray(rated_pressure_bar, dtype=float)
    mu = np.asarray(mu_pas, dtype=float)
    return scalar_or_array((p_r / _positive_or_nan(pressure_bar)) * (mu / _positive_or_nan(mu_ref_pas)))


def leakage_power_kw(pressure_bar, slip_lpm):
    """Power in kW lost to a leak at the working pressure (it ends up as heat in the oil): p * Q_s / 600."""
    return hydraulic_power_kw(pressure_bar, slip_lpm)
