"""Cost of leakage and overhaul payback, checked with pint and against the pump formulas."""

import numpy as np
import pint
import pytest

from fleet.physics.energy import leakage_cost_per_year, overhaul_payback_years
from fleet.physics.leakage import leakage_power_kw
from fleet.physics.pump import theoretical_flow_lpm

UREG = pint.UnitRegistry()
Q_ = UREG.Quantity


def test_leakage_cost_matches_pint_energy_arithmetic():
    # domain.md sec. 8: yearly cost = P_loss / eta_motor * running hours * tariff; pint turns kW * h into kWh
    loss_kw = np.array([0.5, 1.8, 6.0])
    hours = np.array([2000.0, 6000.0, 8000.0])
    energy_kwh = (Q_(loss_kw, "kW") / 0.95 * Q_(hours, "hour")).to("kWh").magnitude
    np.testing.assert_allclose(leakage_cost_per_year(loss_kw, 0.95, hours, 0.15), energy_kwh * 0.15, rtol=1e-12)


def test_worn_pump_cost_and_payback_worked_through():
    # Synthetic pump of domain.md sec. 2 (computed, no source): 45 cm3/rev, 1500 rpm, 200 bar, eta_v 0.92
    # -> slip 67.5 - 62.1 = 5.4 L/min -> 1.8 kW lost (sec. 8: p Q_s / 600). Invented site: motor 0.95,
    # 6000 h/year, 0.15 per kWh -> 1.8 / 0.95 * 6000 * 0.15 = 1705.26 per year.
    q_th = theoretical_flow_lpm(45.0, 1500.0)
    loss_worn_kw = leakage_power_kw(200.0, q_th * (1 - 0.92))
    assert loss_worn_kw == pytest.approx(1.8)
    cost_worn = leakage_cost_per_year(loss_worn_kw, 0.95, 6000.0, 0.15)
    assert cost_worn == pytest.approx(1705.26, abs=0.005)
    # restored to eta_v 0.97 new (inside the 0.92-0.98 textbook range for piston pumps, from memory):
    # 2.025 L/min slip -> 0.675 kW -> 639.47 per year; saving 1065.79; an invented 3200 overhaul pays in 3.00 years
    cost_new = leakage_cost_per_year(leakage_power_kw(200.0, q_th * (1 - 0.97)), 0.95, 6000.0, 0.15)
    assert cost_new == pytest.approx(639.47, abs=0.005)
    assert overhaul_payback_years(3200.0, cost_worn - cost_new) == pytest.approx(3.0025, abs=1e-4)


def test_payback_is_nan_without_a_saving():
    # domain.md sec. 8: payback = overhaul cost / yearly saving; no saving, no payback
    years = overhaul_payback_years(np.array([3000.0, 3000.0, 3000.0, 3000.0]), np.array([1500.0, 0.0, -10.0, np.nan]))
    assert years[0] == pytest.approx(2.0)
    assert np.isnan(years[1:]).all()
    assert isinstance(overhaul_payback_years(3000.0, 1500.0), float)


def test_motor_efficiency_outside_zero_to_one_gives_nan():
    cost = leakage_cost_per_year(1.8, np.array([0.0, -0.9, 1.2, np.nan, 1.0]), 6000.0, 0.15)
    assert np.isnan(cost[:4]).all()
    assert cost[4] == pytest.approx(1.8 * 6000.0 * 0.15)
