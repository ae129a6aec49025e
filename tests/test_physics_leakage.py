"""Gap leakage, Wilson's slip model and referral to reference conditions, checked with pint and the physics."""

import numpy as np
import pint
import pytest

from fleet.physics.leakage import (
    leakage_power_kw,
    referral_factor,
    slot_leakage_lpm,
    wilson_eta_v,
    wilson_slip_lpm,
)
from fleet.physics.oil import dynamic_viscosity_pas, kinematic_viscosity_cst
from fleet.physics.pump import theoretical_flow_lpm

UREG = pint.UnitRegistry()
Q_ = UREG.Quantity


def test_slot_leakage_check_values():
    # Plane Poiseuille flow through a slit, Q = b h^3 dp / (12 mu L) (any fluid mechanics text; domain.md sec. 4):
    # b 10 mm, h 20 um, L 5 mm, dp 200 bar: mu 0.040 Pa.s -> 0.0400 L/min; mu 0.0175 Pa.s -> 0.0914 L/min
    q = slot_leakage_lpm(0.010, 20e-6, 0.005, 200.0, np.array([0.040, 0.0175]))
    np.testing.assert_allclose(q, [0.0400, 0.0914], atol=5e-5)


def test_slot_leakage_matches_pint_unit_arithmetic():
    # pint: b h^3 dp / (12 mu L) with units attached throughout, converted to L/min
    b, h, length = Q_(12.0, "mm"), Q_(35.0, "micrometer"), Q_(4.0, "mm")
    dp, mu = Q_(150.0, "bar"), Q_(0.025, "Pa*s")
    expected = (b * h**3 * dp / (12 * mu * length)).to("L/min").magnitude
    got = slot_leakage_lpm(0.012, 35e-6, 0.004, 150.0, 0.025)
    assert got == pytest.approx(expected, rel=1e-12)


def test_slot_leakage_grows_with_gap_cubed_and_pressure():
    # Hagen-Poiseuille slit law (domain.md sec. 4): leakage ~ h^3 (wear) and ~ dp, ~ 1/mu
    gaps_m = np.array([10e-6, 20e-6, 40e-6])
    q = slot_leakage_lpm(0.010, gaps_m, 0.005, 200.0, 0.040)
    np.testing.assert_allclose(q[1:] / q[:-1], [8.0, 8.0])
    assert slot_leakage_lpm(0.010, 20e-6, 0.005, 100.0, 0.040) == pytest.approx(0.0200, abs=5e-6)
    # a bad length or viscosity gives NaN, not a division warning
    assert np.isnan(slot_leakage_lpm(0.010, 20e-6, np.array([0.0, 0.005]), 200.0, np.array([0.04, 0.0]))).all()


def test_wilson_slip_matches_pint_unit_arithmetic():
    # Wilson (1950) slip flow Q_s = C_s D dp / mu, D = V_g / (2 pi rad) (domain.md sec. 4), with pint units
    c_s, vg = 2.0e-8, Q_(45.0, "cm**3")
    dp, mu = Q_(200.0, "bar"), Q_(0.025, "Pa*s")
    displacement_per_rad = vg / (2 * np.pi)
    expected = (c_s * displacement_per_rad * dp / mu).to("L/min").magnitude
    assert wilson_slip_lpm(c_s, 45.0, 200.0, 0.025) == pytest.approx(expected, rel=1e-12)


def test_wilson_slip_and_efficiency_are_the_same_model():
    # Wilson's model: Q_th = D omega, so Q_s / Q_th = C_s dp / (mu omega) = 1 - eta_v, at every operating point
    c_s = np.array([1.0e-8, 2.0e-8, 4.0e-8])
    dp_bar = np.array([[100.0], [200.0], [300.0]])
    mu = 0.025
    slip = wilson_slip_lpm(c_s, 45.0, dp_bar, mu)
    eta_v = wilson_eta_v(c_s, dp_bar, mu, 1500.0)
    assert slip.shape == eta_v.shape == (3, 3)
    np.testing.assert_allclose(slip / theoretical_flow_lpm(45.0, 1500.0), 1.0 - eta_v, rtol=1e-12)
    assert np.isnan(wilson_eta_v(2e-8, 200.0, 0.025, np.array([0.0, np.nan]))).all()


def test_referral_recovers_the_reference_slip_of_a_wilson_pump():
    # Wilson's model (domain.md sec. 4): a pump with a fixed slip coefficient, read hot (65 degC) at a low working
    # pressure (120 bar), must refer to exactly the slip it has at rated 250 bar and the 50 degC reference.
    nu40, nu100, rho15 = 46.0, 6.8, 0.87  # invented VG 46 data sheet
    c_s, vg = 3.0e-8, 45.0
    temps_c = np.array([35.0, 50.0, 65.0])
    mu = dynamic_viscosity_pas(temps_c, nu40, nu100, rho15)
    mu_ref = dynamic_viscosity_pas(50.0, nu40, nu100, rho15)
    measured = wilson_slip_lpm(c_s, vg, 120.0, mu)
    referred = measured * referral_factor(120.0, 250.0, mu, mu_ref)
    np.testing.assert_allclose(referred, wilson_slip_lpm(c_s, vg, 250.0, mu_ref), rtol=1e-12)


def test_hot_oil_leaks_about_2_2_times_more():
    # domain.md sec. 4: VG 46 viscosity ratio 40 -> 60 degC is 2.23, so the same gap leaks ~2.2x more when hot
    # (density held at 0.87 kg/L on both sides, as the 2.23 figure is a kinematic viscosity ratio)
    mu_40, mu_60 = (kinematic_viscosity_cst(t, 46.0, 6.8) * 0.87e-3 for t in (40.0, 60.0))
    q_40, q_60 = (slot_leakage_lpm(0.010, 20e-6, 0.005, 200.0, mu) for mu in (mu_40, mu_60))
    assert q_60 / q_40 == pytest.approx(2.23, abs=0.005)
    # referring the 60 degC reading back to 40 degC divides by that same ratio
    assert q_60 * referral_factor(200.0, 200.0, mu_60, mu_40) == pytest.approx(q_40, rel=1e-12)


def test_referral_factor_values_and_nan():
    # domain.md sec. 4: factor = (p_r / p) * (mu / mu_ref); NaN where p <= 0
    factor = referral_factor(np.array([100.0, 250.0, 0.0, -5.0, np.nan]), 250.0, 0.02, 0.025)
    np.testing.assert_allclose(factor[:2], [2.5 * 0.8, 0.8])
    assert np.isnan(factor[2:]).all()
    assert np.isnan(referral_factor(100.0, 250.0, 0.02, 0.0))


def test_leakage_power_matches_pint():
    # domain.md sec. 8: P_loss = p Q_s / 600; pint (bar * L/min) -> kW
    pressures_bar = np.array([100.0, 200.0, 315.0])
    slips_lpm = np.array([3.0, 5.4, 12.0])
    expected = (Q_(pressures_bar, "bar") * Q_(slips_lpm, "L/min")).to("kW").magnitude
    np.testing.assert_allclose(leakage_power_kw(pressures_bar, slips_lpm), expected, rtol=1e-12)
    assert leakage_power_kw(200.0, 5.4) == pytest.approx(1.8)
