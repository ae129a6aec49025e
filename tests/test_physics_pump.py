"""Pump flow, efficiency, power and torque formulas against handbook worked examples, pint and scipy."""

import numpy as np
import pint
import pytest
from scipy import integrate

from fleet.physics.pump import (
    gear_displacement_cc,
    hydraulic_power_kw,
    ideal_torque_nm,
    input_torque_nm,
    overall_efficiency,
    shaft_power_kw,
    theoretical_flow_lpm,
    volumetric_efficiency,
)

UREG = pint.UnitRegistry()
Q_ = UREG.Quantity


def test_flow_and_volumetric_efficiency_worked_example():
    # Fluid Power Journal, "Hydraulic Pumps and Motors: Considering Efficiency" (domain.md sec. 2):
    # 100 cm3/rev at 1000 rpm -> 100 L/min theoretical; 90 L/min measured at 207 bar -> eta_v 0.90
    q_th = theoretical_flow_lpm(100.0, 1000.0)
    assert q_th == pytest.approx(100.0)
    assert volumetric_efficiency(90.0, q_th) == pytest.approx(0.90)


def test_worn_piston_pump_in_us_units():
    # domain.md sec. 2 worked example: 1.800 in3/rev at 1500 rpm -> 11.69 gal/min theoretical;
    # 10.0 gal/min measured -> eta_v 0.855. Units converted by pint (NIST SP 811 definitions).
    displacement_cc = Q_(1.800, "inch**3").to("cm**3").magnitude
    q_th_lpm = theoretical_flow_lpm(displacement_cc, 1500.0)
    assert Q_(q_th_lpm, "L/min").to("gallon/min").magnitude == pytest.approx(11.69, abs=0.005)
    q_lpm = Q_(10.0, "gallon/min").to("L/min").magnitude
    assert q_lpm == pytest.approx(37.854, abs=5e-4)  # domain.md sec. 1: 10 gal/min = 37.854 L/min
    # the example divides by the rounded 11.69 (10 / 11.69 = 0.8554); exact units give 0.8556
    assert volumetric_efficiency(q_lpm, q_th_lpm) == pytest.approx(0.855, abs=1e-3)


def test_hydraulic_power_and_drive_power_worked_example():
    # Hydraulics handbook formula P = p Q / 600 (domain.md sec. 2, arithmetic):
    # 180 L/min at 250 bar -> 75 kW; at overall efficiency 0.87 the drive needs ~86.2 kW
    p_kw = hydraulic_power_kw(250.0, 180.0)
    assert p_kw == pytest.approx(75.0)
    assert p_kw / 0.87 == pytest.approx(86.2, abs=0.05)


def test_hydraulic_power_matches_pint_and_the_us_horsepower_formula():
    # pint unit arithmetic: (bar * L/min) -> kW
    pressures_bar = np.array([50.0, 206.84, 350.0])
    flows_lpm = np.array([10.0, 37.854, 120.0])
    expected_kw = (Q_(pressures_bar, "bar") * Q_(flows_lpm, "L/min")).to("kW").magnitude
    np.testing.assert_allclose(hydraulic_power_kw(pressures_bar, flows_lpm), expected_kw, rtol=1e-12)
    # US trade form hp = psi * gpm / 1714 (domain.md sec. 2): 3000 psi, 10 gal/min -> 17.50 hp
    hp_us = 3000.0 * 10.0 / 1714.0
    p_bar = Q_(3000.0, "psi").to("bar").magnitude
    assert p_bar == pytest.approx(206.84, abs=0.005)  # domain.md sec. 1: 3000 psi = 206.84 bar
    q_lpm = Q_(10.0, "gallon/min").to("L/min").magnitude
    kw = hydraulic_power_kw(p_bar, q_lpm)
    assert Q_(kw, "kW").to("hp").magnitude == pytest.approx(hp_us, rel=1e-3)


def test_synthetic_pump_operating_point():
    # domain.md sec. 2, synthetic (computed, no source):
    # 45 cm3/rev, 1500 rpm, 200 bar, eta_v 0.92, eta_hm 0.88
    # -> Q_th 67.5 L/min, Q 62.1 L/min, P_h 20.70 kW, T_in 162.77 N.m, P_in 25.57 kW
    q_th = theoretical_flow_lpm(45.0, 1500.0)
    q = q_th * 0.92
    torque_in = input_torque_nm(45.0, 200.0, 0.88)
    assert q_th == pytest.approx(67.5)
    assert q == pytest.approx(62.1)
    assert hydraulic_power_kw(200.0, q) == pytest.approx(20.70, abs=0.005)
    assert torque_in == pytest.approx(162.77, abs=0.005)
    assert shaft_power_kw(torque_in, 1500.0) == pytest.approx(25.57, abs=0.005)
    # energy balance: hydraulic out / shaft in is the overall efficiency eta_v * eta_hm
    ratio = hydraulic_power_kw(200.0, q) / shaft_power_kw(torque_in, 1500.0)
    assert ratio == pytest.approx(overall_efficiency(0.92, 0.88), rel=1e-12)


def test_ideal_torque_matches_pint():
    # pint: T = V * p / (2 pi rad), cm3 * bar -> N.m
    displacement_cc = np.array([10.0, 45.0, 250.0])
    pressure_bar = np.array([100.0, 200.0, 350.0])
    expected = (Q_(displacement_cc, "cm**3") * Q_(pressure_bar, "bar") / (2 * np.pi)).to("N*m").magnitude
    np.testing.assert_allclose(ideal_torque_nm(displacement_cc, pressure_bar), expected, rtol=1e-12)
    # handbook working form V p / (20 pi) (domain.md sec. 2)
    assert ideal_torque_nm(100.0, 100.0) == pytest.approx(100.0 * 100.0 / (20 * np.pi))


def test_shaft_power_matches_pint_and_the_9549_constant():
    # pint: P = T * omega, N.m * rev/min -> kW
    torque_nm = np.array([50.0, 162.77, 600.0])
    speed_rpm = np.array([3000.0, 1500.0, 1000.0])
    omega = Q_(speed_rpm, "revolution/minute")
    expected = (Q_(torque_nm, "N*m") * omega).to("kW").magnitude
    np.testing.assert_allclose(shaft_power_kw(torque_nm, speed_rpm), expected, rtol=1e-12)
    # handbook working form T n / 9549.3 (domain.md sec. 2); some tables print 9554, so a loose check there
    power_kw = shaft_power_kw(torque_nm, speed_rpm)
    np.testing.assert_allclose(power_kw, torque_nm * speed_rpm / 9549.3, rtol=1e-5)
    np.testing.assert_allclose(power_kw, torque_nm * speed_rpm / 9554.0, rtol=1e-3)


def test_gear_displacement_matches_scipy_annulus_integral():
    # textbook form V = (pi/4)(D_tip^2 - D_root^2) b (domain.md sec. 2), checked against the annulus area
    # integrated numerically with scipy.integrate.quad (area = integral of 2 pi r dr from r_root to r_tip).
    # Invented gear: tip 4.0 cm, root 3.0 cm, width 2.0 cm.
    area_cm2, _ = integrate.quad(lambda r: 2 * np.pi * r, 1.5, 2.0)
    assert gear_displacement_cc(4.0, 3.0, 2.0) == pytest.approx(area_cm2 * 2.0, rel=1e-12)
    assert gear_displacement_cc(4.0, 3.0, 2.0) == pytest.approx(np.pi / 4 * 7.0 * 2.0)
    assert np.isnan(gear_displacement_cc(3.0, 4.0, 2.0))


def test_arrays_broadcast_and_bad_denominators_give_nan_quietly():
    # a fleet's readings at once: (3 pumps) x (2 speeds) without a Python loop
    displacement_cc = np.array([[28.0], [45.0], [71.0]])
    q_th = theoretical_flow_lpm(displacement_cc, np.array([1000.0, 1500.0]))
    assert q_th.shape == (3, 2)
    np.testing.assert_allclose(q_th[:, 1], [42.0, 67.5, 106.5])
    # stroke fraction of a variable pump
    assert theoretical_flow_lpm(45.0, 1500.0, stroke=0.5) == pytest.approx(33.75)
    # theoretical flow of 0 (pump stopped) or NaN: no division warning, NaN out
    eta = volumetric_efficiency(np.array([62.1, 10.0, 5.0]), np.array([67.5, 0.0, np.nan]))
    assert eta[0] == pytest.approx(0.92)
    assert np.isnan(eta[1:]).all()
    assert np.isnan(input_torque_nm(45.0, 200.0, np.array([0.0, -0.5]))).all()
    assert isinstance(hydraulic_power_kw(200.0, 62.1), float)
