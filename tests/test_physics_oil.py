"""Oil viscosity, density, viscosity window and oil life against published and reference values."""

import numpy as np
import pint
import pytest
from scipy import optimize, stats

from fleet.physics.oil import (
    DENSITY_EXPANSION_PER_K,
    VISCOSITY_WINDOW_CST,
    density_kg_per_l,
    dynamic_viscosity_pas,
    iso_vg_limits,
    kinematic_viscosity_cst,
    oil_life_factor,
    temperature_for_viscosity_c,
    viscosity_window_flag,
    walther_constants,
    walther_constants_at,
    walther_viscosity_cst,
)

UREG = pint.UnitRegistry()


# --- ASTM D341 (Walther) ------------------------------------------------------------------------------------


def test_astm_d341_worked_example_32_and_5_4_cst():
    # ASTM D341 worked example (reproduced in domain.md sec. 3):
    # 32 / 5.4 cSt at 40 / 100 degC -> 8.53 cSt at 80 degC
    assert kinematic_viscosity_cst(80.0, 32.0, 5.4) == pytest.approx(8.53, abs=0.005)


def test_astm_d341_worked_example_404_and_28_cst():
    # ASTM D341 worked example (reproduced in domain.md sec. 3):
    # 404 / 28 cSt at 40 / 100 degC -> 132.13 cSt at 60 degC
    assert kinematic_viscosity_cst(60.0, 404.0, 28.0) == pytest.approx(132.13, abs=0.01)


def test_astm_d341_worked_example_from_40_and_80_degc_points():
    # ASTM D341 worked example (reproduced in domain.md sec. 3):
    # 68 cSt at 40 degC and 14.85 cSt at 80 degC -> ~8.79 cSt at 100 degC
    a, b = walther_constants_at(40.0, 68.0, 80.0, 14.85)
    assert walther_viscosity_cst(100.0, a, b) == pytest.approx(8.79, abs=0.005)


def test_vg46_curve_between_data_sheet_points():
    # domain.md sec. 3: VG 46 with nu100 = 6.8 (typical for VI ~100, from memory), values by ASTM D341
    temps_c = np.array([50.0, 60.0, 70.0, 80.0])
    nu = kinematic_viscosity_cst(temps_c, 46.0, 6.8)
    assert isinstance(nu, np.ndarray) and nu.shape == (4,)
    np.testing.assert_allclose(nu, [29.97, 20.62, 14.85, 11.10], atol=0.006)


def test_vg46_viscosity_ratio_40_to_60_degc():
    # domain.md sec. 4: VG 46 viscosity ratio 40 -> 60 degC is 2.23 (the same pump leaks ~2.2x more when hot)
    ratio = kinematic_viscosity_cst(40.0, 46.0, 6.8) / kinematic_viscosity_cst(60.0, 46.0, 6.8)
    assert ratio == pytest.approx(2.23, abs=0.005)


def test_data_sheet_points_are_reproduced():
    # ASTM D341: the line is fixed by the two data-sheet points, so it must pass through both
    nu = kinematic_viscosity_cst(np.array([40.0, 100.0]), 46.0, 6.8)
    np.testing.assert_allclose(nu, [46.0, 6.8], rtol=1e-12)


def test_walther_constants_match_a_least_squares_line_from_scipy():
    # scipy.stats.linregress on the ASTM D341 transform log10(log10(nu + 0.7)) against log10(T_K) of points
    # taken off the curve must give back the same A and slope -B.
    a, b = walther_constants(68.0, 8.6)
    temps_c = np.array([20.0, 40.0, 60.0, 80.0, 100.0])
    nu = kinematic_viscosity_cst(temps_c, 68.0, 8.6)
    fit = stats.linregress(np.log10(temps_c + 273.15), np.log10(np.log10(nu + 0.7)))
    assert fit.intercept == pytest.approx(a, rel=1e-10)
    assert -fit.slope == pytest.approx(b, rel=1e-10)


def test_temperature_for_viscosity_agrees_with_scipy_root_finding():
    # scipy.optimize.brentq on the forward curve: VG 46 hits the 1000 cSt cold-start limit at about -6.1 degC
    def excess_cst(temp_c):
        return kinematic_viscosity_cst(temp_c, 46.0, 6.8) - 1000.0

    root_c = optimize.brentq(excess_cst, -60.0, 40.0, xtol=1e-12)
    assert temperature_for_viscosity_c(1000.0, 46.0, 6.8) == pytest.approx(root_c, abs=1e-8)


def test_viscosity_broadcasts_over_temperatures_and_oils():
    temps_c = np.array([[40.0], [60.0], [80.0]])
    nu40 = np.array([32.0, 46.0, 68.0])
    nu100 = np.array([5.4, 6.8, 8.6])
    nu = kinematic_viscosity_cst(temps_c, nu40, nu100)
    assert nu.shape == (3, 3)
    np.testing.assert_allclose(nu[0], nu40)
    assert np.all(np.diff(nu, axis=0) < 0)  # every oil thins as it warms
    assert np.all(np.diff(nu[1]) > 0)  # heavier grades stay heavier


def test_nan_and_impossible_oils_give_nan_without_warnings():
    nu = kinematic_viscosity_cst(np.array([np.nan, 50.0, 50.0, 50.0, -300.0]),
                                 np.array([46.0, 6.0, 46.0, 0.2, 46.0]),
                                 np.array([6.8, 6.8, np.nan, 0.1, 6.8]))  # fmt: skip
    assert np.isnan(nu).all()
    assert isinstance(kinematic_viscosity_cst(50.0, 46.0, 6.8), float)


# --- density and dynamic viscosity --------------------------------------------------------------------------


def test_density_falls_about_0_07_percent_per_kelvin():
    # domain.md sec. 3: mineral oil ~0.87 kg/L at 15 degC (from memory), falls ~0.07 %/K (common practice)
    assert DENSITY_EXPANSION_PER_K == pytest.approx(0.0007)
    rho = density_kg_per_l(np.array([15.0, 50.0, 80.0]), 0.87)
    np.testing.assert_allclose(rho, [0.87, 0.87 * (1 - 0.0007 * 35), 0.87 * (1 - 0.0007 * 65)], rtol=1e-12)
    # ASTM D1250 lube-oil table: about 0.00072/K near 0.87 kg/L (from memory); within 0.2 % at 80 degC
    assert rho[2] == pytest.approx(0.87 * (1 - 0.00072 * 65), rel=2e-3)


def test_dynamic_viscosity_matches_pint_unit_arithmetic():
    # pint: mu = nu * rho, converting mm2/s * kg/L to Pa.s with pint's own unit definitions
    temps_c = np.array([40.0, 50.0, 60.0])
    nu = kinematic_viscosity_cst(temps_c, 46.0, 6.8)
    rho = density_kg_per_l(temps_c, 0.87)
    expected = (UREG.Quantity(nu, "mm**2/s") * UREG.Quantity(rho, "kg/L")).to("Pa*s").magnitude
    np.testing.assert_allclose(dynamic_viscosity_pas(temps_c, 46.0, 6.8, 0.87), expected, rtol=1e-12)
    # VG 46 at 50 degC: ~30 cSt x ~0.85 kg/L = ~0.025 Pa.s (hydraulics handbook order of magnitude)
    assert dynamic_viscosity_pas(50.0, 46.0, 6.8, 0.87) == pytest.approx(0.02544, abs=5e-5)


# --- viscosity window ---------------------------------------------------------------------------------------


def test_viscosity_window_limits():
    # domain.md sec. 3: short-term min ~10, optimum ~16-36, cold-start max ~1000 cSt
    # (common practice, no source)
    assert (VISCOSITY_WINDOW_CST.short_term_min, VISCOSITY_WINDOW_CST.optimum_low) == (10.0, 16.0)
    assert (VISCOSITY_WINDOW_CST.optimum_high, VISCOSITY_WINDOW_CST.cold_start_max) == (36.0, 1000.0)
    nu = np.array([5.0, 9.99, 10.0, 15.9, 16.0, 25.0, 36.0, 36.1, 1000.0, 1000.1, np.nan])
    expected = ["too_thin"] * 2 + ["thin"] * 2 + ["ok"] * 3 + ["thick"] * 2 + ["too_thick", "unknown"]
    assert viscosity_window_flag(nu).tolist() == expected
    assert viscosity_window_flag(25.0) == "ok"


def test_vg46_window_across_bulk_oil_temperatures():
    # domain.md sec. 7: bulk oil typically 45-65 degC, keep below ~80 degC (lubrication practice articles).
    # VG 46 (nu100 6.8) by ASTM D341: 36.9 cSt @45 (just thick), 17.4 @65 (ok), 11.1 @80 (thin),
    # 9.7 @85 (too thin)
    nu = kinematic_viscosity_cst(np.array([45.0, 65.0, 80.0, 85.0]), 46.0, 6.8)
    assert viscosity_window_flag(nu).tolist() == ["thick", "ok", "thin", "too_thin"]
    # the optimum band 16-36 cSt maps to ~45.6-67.6 degC for this oil
    band_c = temperature_for_viscosity_c(np.array([36.0, 16.0]), 46.0, 6.8)
    np.testing.assert_allclose(band_c, [45.55, 67.61], atol=0.01)


# --- ISO 3448 grades and oil life ---------------------------------------------------------------------------


def test_iso_vg_limits():
    # ISO 3448 (domain.md sec. 3): grade +-10 %:
    # VG 32 28.8-35.2, VG 46 41.4-50.6, VG 68 61.2-74.8, VG 100 90-110
    low, high = iso_vg_limits(np.array([32, 46, 68, 100]))
    np.testing.assert_allclose(low, [28.8, 41.4, 61.2, 90.0])
    np.testing.assert_allclose(high, [35.2, 50.6, 74.8, 110.0])
    assert iso_vg_limits(46) == pytest.approx((41.4, 50.6))


def test_oil_life_factor():
    # domain.md sec. 7: life halves per 10 degC above ~60 degC (common practice): 1.0 @60, 0.5 @70, 0.25 @80;
    # no credit below 60 degC
    factor = oil_life_factor(np.array([20.0, 60.0, 65.0, 70.0, 80.0, np.nan]))
    np.testing.assert_allclose(factor, [1.0, 1.0, 2**-0.5, 0.5, 0.25, np.nan])
