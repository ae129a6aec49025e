"""Positive-displacement pump formulas in metric working units (bar, L/min, rpm, cm3/rev, N.m, kW).

Every function takes scalars or numpy arrays and broadcasts; a scalar answer comes back as a Python float,
an array answer as a numpy array. A ratio with a zero or negative denominator gives NaN, never a warning.
"""

import numpy as np

from fleet.physics.arrays import scalar_or_array

# bar * L/min -> kW: 1e5 Pa * (1e-3 / 60) m3/s = 1e2/60 W = 1/600 kW.
KW_PER_BAR_LPM = 1.0 / 600.0
# cm3 * bar -> N.m per radian: 1e-6 m3 * 1e5 Pa = 0.1 J, and one revolution is 2 pi rad, so T = V p / (20 pi).
NM_PER_CC_BAR = 0.1 / (2.0 * np.pi)
# N.m * rpm -> kW: T * 2 pi n / 60 W = T n / 9549.3 kW.
KW_PER_NM_RPM = 2.0 * np.pi / 60_000.0



def _ratio(numerator, denominator):
    """numerator / denominator, NaN where the denominator is not positive."""
    num = np.asarray(numerator, dtype=float)
    den = np.asarray(denominator, dtype=float)
    ok = den > 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, num / np.where(ok, den, 1.0), np.nan)


def theoretical_flow_lpm(displacement_cc, speed_rpm, stroke=1.0):
    """Geometric flow in L/min: displacement (cm3/rev) x speed (rpm) x stroke fraction / 1000."""
    vg = np.asarray(displacement_cc, dtype=float)
    return scalar_or_array(vg * np.asarray(speed_rpm, dtype=float) * np.asarray(stroke, dtype=float) / 1000.0)


def volumetric_efficiency(flow_lpm, theoretical_lpm):
    """Measured outlet flow over geometric flow (fraction); NaN where the geometric flow is not positive."""
    return scalar_or_array(_ratio(flow_lpm, theoretical_lpm))


def hydraulic_power_kw(pressure_bar, flow_lpm):
    """Hydraulic power in kW carried by a flow at a pressure: p * Q / 600."""
    return scalar_or_array(np.asarray(pressure_bar, dtype=float) * np.asarray(flow_lpm, dtype=float) * KW_PER_BAR_LPM)


def ideal_torque_nm(displacement_cc, pressure_bar):
    """Torque in N.m a loss-free pump needs to deliver its displacement against a pressure: V p / (20 pi)."""
    vg = np.asarray(displacement_cc, dtype=float)
    return scalar_or_array(vg * np.asarray(pressure_bar, dtype=float) * NM_PER_CC_BAR)


def input_torque_nm(displacement_cc, pressure_bar, eta_hm):
    """Shaft torque in N.m the drive supplies: ideal torque / hydromechanical efficiency (NaN if eta <= 0)."""
    return scalar_or_array(_ratio(ideal_torque_nm(displacement_cc, pressure_bar), eta_hm))


def shaft_power_kw(torque_nm, speed_rpm):
    """Mechanical shaft power in kW: T * 2 pi n / 60000 (T n / 9549.3)."""
    return scalar_or_array(np.asarray(torque_nm, dtype=float) * np.asarray(speed_rpm, dtype=float) * KW_PER_NM_RPM)


def overall_efficiency(eta_v, eta_hm):
    """Overall pump efficiency: volumetric x hydromechanical."""
    return scalar_or_array(np.asarray(eta_v, dtype=float) * np.asarray(eta_hm, dtype=float))


def gear_displacement_cc(tip_diameter_cm, root_diameter_cm, width_cm):
    """External gear pump displacement in cm3/rev, textbook form (pi/4)(D_tip^2 - D_root^2) b.

    NaN where the root diameter is not smaller than the tip diameter.
    """
    d_tip = np.asarray(tip_diameter_cm, dtype=float)
    d_root = np.asarray(root_diameter_cm, dtype=float)
    area_cm2 = np.pi / 4.0 * (d_tip**2 - d_root**2)
    valid = (d_tip > d_root) & (d_root >= 0.0)
    return scalar_or_array(np.where(valid, area_cm2 * np.asarray(width_cm, dtype=float), np.nan))


def baseline_flow_lpm(displacement_cc, speed_rpm, slip_at_rated_lpm, rated_pressure_bar, pressure_bar,
                      viscosity_ratio=1.0):
    """Outlet flow a pump with a known slip should give: theoretical flow minus slip growing with pressure.

    Laminar slip is proportional to pressure and inversely to viscosity (Wilson's model); viscosity_ratio is
    mu_ref / mu at the test's oil temperature (1.0 at the reference temperature).
    """
    pressure = np.asarray(pressure_bar, dtype=float)
    slip = np.asarray(slip_at_rated_lpm, dtype=float) * pressure / float(rated_pressure_bar) * viscosity_ratio
    return np.asarray(theoretical_flow_lpm(displacement_cc, speed_rpm), dtype=float) - slip
