"""Hydraulic oil properties: viscosity against temperature, density, the working viscosity window, oil life.

Every function takes scalars or numpy arrays and broadcasts; a scalar answer comes back as a Python float
(or str), an array answer as a numpy array. Invalid inputs give NaN, never a warning.
"""

from dataclasses import dataclass

import numpy as np

from fleet.physics.arrays import scalar_or_array

KELVIN_OFFSET = 273.15

# ASTM D341 adds 0.7 to the kinematic viscosity before the double logarithm. Its extra correction terms matter
# only below about 2 mm2/s, far thinner than any hydraulic oil, so they are left out.
WALTHER_OFFSET_CST = 0.7

# Density falls about 0.07 % per kelvin (common practice; the ASTM D1250 lube-oil table gives about 0.00072/K
# near 0.87 kg/L, from memory). A linear law is plenty over 0..100 degC for a viscosity-to-Pa.s conversion.
DENSITY_EXPANSION_PER_K = 0.0007
DENSITY_REFERENCE_TEMP_C = 15.0

# ISO 3448: a viscosity grade is the midpoint kinematic viscosity at 40 degC, with limits +-10 %. The grades:
# the 18 of ISO 3448:1992 (2 to 1500, each about 1.5 times the one before), and 2200 and 3200, which wider grade
# tables of the same series add (from memory) and which ISO_VG_MAX (fleet.io.columns) admitted before.
ISO_VG_TOLERANCE = 0.10
ISO_VG_GRADES = (2, 3, 5, 7, 10, 15, 22, 32, 46, 68, 100, 150, 220, 320, 460, 680, 1000, 1500, 2200, 3200)

# Oil life halves for every 10 degC above 60 degC (common practice, no source; the Arrhenius rule of thumb
# that oxidation rate doubles per 10 K). No extra credit is given for running colder than 60 degC.
OIL_LIFE_REFERENCE_TEMP_C = 60.0
OIL_LIFE_HALVING_STEP_K = 10.0



def _log10_kelvin(temp_c):
    """log10 of the absolute temperature; NaN at or below absolute zero."""
    t_k = np.asarray(temp_c, dtype=float) + KELVIN_OFFSET
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.log10(np.where(t_k > 0.0, t_k, np.nan))


def _walther_z(nu_cst):
    """log10(log10(nu + 0.7)); NaN where the double logarithm is undefined (nu <= 0.3 mm2/s)."""
    nu = np.asarray(nu_cst, dtype=float)
    inner = nu + WALTHER_OFFSET_CST
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.log10(np.log10(np.where(inner > 1.0, inner, np.nan)))
    return z


def walther_constants_at(temp_a_c, nu_a_cst, temp_b_c, nu_b_cst):
    """ASTM D341 constants (A, B) from any two (temperature, viscosity) points.

    log10(log10(nu + 0.7)) = A - B * log10(T_K). NaN where the points cannot describe an oil
    (viscosity not falling with temperature, equal temperatures, or viscosity <= 0.3 mm2/s).
    """
    log_ta = _log10_kelvin(temp_a_c)
    log_tb = _log10_kelvin(temp_b_c)
    z_a = _walther_z(nu_a_cst)
    z_b = _walther_z(nu_b_cst)
    span = log_tb - log_ta
    with np.errstate(invalid="ignore", divide="ignore"):
        b = np.where(span != 0.0, (z_a - z_b) / np.where(span != 0.0, span, 1.0), np.nan)
    b = np.where(b > 0.0, b, np.nan)  # a real oil thins as it warms
    a = z_a + b * log_ta
    return scalar_or_array(a), scalar_or_array(b)


def walther_constants(nu40, nu100):
    """ASTM D341 constants (A, B) from the two data-sheet viscosities at 40 and 100 degC (mm2/s)."""
    return walther_constants_at(40.0, nu40, 100.0, nu100)


def walther_viscosity_cst(temp_c, a, b):
    """Kinematic viscosity in mm2/s at temp_c from ASTM D341 constants A and B."""
    z = np.asarray(a, dtype=float) - np.asarray(b, dtype=float) * _log10_kelvin(temp_c)
    with np.errstate(over="ignore"):  # far below any pour point the curve runs off to inf, which is fair
        nu = 10.0 ** (10.0**z) - WALTHER_OFFSET_CST
    return scalar_or_array(nu)


def kinematic_viscosity_cst(temp_c, nu40, nu100):
    """Kinematic viscosity in mm2/s at any temperature from the data-sheet values at 40 and 100 degC."""
    a, b = walther_constants(nu40, nu100)
    return walther_viscosity_cst(temp_c, a, b)


def temperature_for_viscosity_c(nu_cst, nu40, nu100):
    """Oil temperature in degC at which the oil reaches nu_cst (the inverse of kinematic_viscosity_cst).

    Used to turn a viscosity limit into a temperature, e.g. the coldest start the pump allows.
    """
    a, b = walther_constants(nu40, nu100)
    log_t = (np.asarray(a, dtype=float) - _walther_z(nu_cst)) / np.asarray(b, dtype=float)
    with np.errstate(over="ignore"):
        t_k = 10.0**log_t
    return scalar_or_array(t_k - KELVIN_OFFSET)


def density_kg_per_l(temp_c, density15):
    """Oil density in kg/L at temp_c from its density at 15 degC (linear thermal expansion)."""
    dt = np.asarray(temp_c, dtype=float) - DENSITY_REFERENCE_TEMP_C
    return scalar_or_array(np.asarray(density15, dtype=float) * (1.0 - DENSITY_EXPANSION_PER_K * dt))


def dynamic_viscosity_pas(temp_c, nu40, nu100, density15):
    """Dynamic viscosity in Pa.s: mu = nu * rho (mm2/s * kg/L = 1e-6 m2/s * 1e3 kg/m3 = 1e-3 Pa.s)."""
    nu = np.asarray(kinematic_viscosity_cst(temp_c, nu40, nu100))
    rho = np.asarray(density_kg_per_l(temp_c, density15))
    return scalar_or_array(nu * rho * 1e-3)


@dataclass(frozen=True)
class ViscosityWindow:
    """Kinematic viscosity limits a pump is happy with, mm2/s (common practice, no source; makers differ)."""

    short_term_min: float = 10.0
    optimum_low: float = 16.0
    optimum_high: float = 36.0
    cold_start_max: float = 1000.0


VISCOSITY_WINDOW_CST = ViscosityWindow()

# Words for viscosity_window_flag, thinnest to thickest; "unknown" where the viscosity is NaN.
VISCOSITY_FLAGS = ("too_thin", "thin", "ok", "thick", "too_thick")
VISCOSITY_FLAG_UNKNOWN = "unknown"


def viscosity_window_flag(nu_cst, window: ViscosityWindow = VISCOSITY_WINDOW_CST):
    """Where a working viscosity sits in the pump's window.

    too_thin: below the short-term minimum; thin: below the optimum band; ok: inside the optimum band
    (limits included); thick: above the band up to the cold-start maximum; too_thick: above that.
    """
    nu = np.asarray(nu_cst, dtype=float)
    # Count the limits passed; both ends of the optimum band and the two outer limits themselves are allowed.
    idx = (
        (nu >= window.short_term_min).astype(int)
        + (nu >= window.optimum_low)
        + (nu > window.optimum_high)
        + (nu > window.cold_start_max)
    )
    flags = np.array(VISCOSITY_FLAGS + (VISCOSITY_FLAG_UNKNOWN,))
    idx = np.where(np.isnan(nu), len(VISCOSITY_FLAGS), idx)
    return scalar_or_array(flags[idx], dtype=None)


def iso_vg_limits(grade):
    """ISO 3448 kinematic viscosity limits (low, high) at 40 degC in mm2/s for a viscosity grade."""
    g = np.asarray(grade, dtype=float)
    return scalar_or_array(g * (1.0 - ISO_VG_TOLERANCE)), scalar_or_array(g * (1.0 + ISO_VG_TOLERANCE))


def oil_life_factor(temp_c):
    """Oil life at temp_c as a fraction of its life at 60 degC: 2**(-(T-60)/10), capped at 1."""
    t = np.asarray(temp_c, dtype=float)
    factor = 2.0 ** (-(t - OIL_LIFE_REFERENCE_TEMP_C) / OIL_LIFE_HALVING_STEP_K)
    return scalar_or_array(np.minimum(factor, 1.0))
