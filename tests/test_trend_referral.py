"""Referring readings to reference conditions, flags, and multi-point flow tests."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from fleet.trend.referral import refer_readings


def _pump(**over):
    base = dict(
        pump_id=1,
        pump="INV-1",
        kind="axial_piston",
        variable=False,
        displacement_cc=100.0,
        rated_speed_rpm=1000.0,
        rated_pressure_bar=250.0,
        max_flow_lpm=100.0,
        case_drain=True,
        reference_temp_c=50.0,
    )
    base.update(over)
    return pd.DataFrame([base])


def _reading(**over):
    base = dict(
        reading_id=1,
        pump_id=1,
        taken_at=pd.Timestamp("2025-03-01 10:00"),
        hours=1000.0,
        pressure_bar=207.0,
        speed_rpm=1000.0,
        flow_lpm=90.0,
        drain_lpm=np.nan,
        temp_c=50.0,
        stroke=np.nan,
        nu40=46.0,
        nu100=6.8,
        density15=0.87,
    )
    base.update(over)
    return pd.DataFrame([base])


def test_measured_efficiency_matches_handbook_example():
    # domain.md sec. 2 (Fluid Power Journal worked example): 100 cm3/rev at 1000 rpm -> 100 L/min
    # theoretical; 90 L/min measured at 207 bar -> eta_v 0.90.
    r = refer_readings(_reading(), _pump())
    assert r.loc[0, "q_th_lpm"] == pytest.approx(100.0)
    assert r.loc[0, "eta_v"] == pytest.approx(0.90)
    assert r.loc[0, "slip_lpm"] == pytest.approx(10.0)
    # leakage power at the working point p Q_s / 600 (domain.md sec. 8): 207 bar x 10 L/min / 600.
    assert r.loc[0, "leakage_kw"] == pytest.approx(207.0 * 10.0 / 600.0)
    assert pd.isna(r.loc[0, "flag"])


def test_hot_low_pressure_reading_is_referred_by_pressure_and_viscosity():
    # VG 46 (nu100 6.8, from memory) at 60 degC is 20.62 cSt and at 50 degC 29.97 cSt (domain.md sec. 3);
    # density falls 0.07 %/K (common practice). Referral Q_ref = Q_s (p_r/p)(mu/mu_ref), domain.md sec. 4.
    r = refer_readings(_reading(pressure_bar=125.0, temp_c=60.0, flow_lpm=96.0, drain_lpm=1.0), _pump())
    rho = lambda t: 0.87 * (1 - 0.0007 * (t - 15))  # noqa: E731
    mu_ratio = (20.62 * rho(60)) / (29.97 * rho(50))
    expected_factor = 250.0 / 125.0 * mu_ratio
    assert r.loc[0, "referral_factor"] == pytest.approx(expected_factor, rel=2e-3)
    assert r.loc[0, "slip_ref_lpm"] == pytest.approx(4.0 * expected_factor, rel=2e-3)
    assert r.loc[0, "eta_v_ref"] == pytest.approx(1 - 4.0 * expected_factor / 100.0, rel=1e-3)
    assert r.loc[0, "drain_pct_ref"] == pytest.approx(1.0 * expected_factor, rel=2e-3)  # % of 100 L/min
    assert r.loc[0, "nu_cst"] == pytest.approx(20.62, abs=0.02)
    assert r.loc[0, "viscosity_window"] == "ok"  # 16-36 cSt band, common practice, no source


def test_fixed_pump_part_stroke_and_variable_pump_at_part_stroke():
    pumps = pd.concat([_pump(), _pump(pump_id=2, variable=True)], ignore_index=True)
    readings = pd.concat(
        [
            _reading(reading_id=1, pump_id=2, stroke=0.6, flow_lpm=55.0),
            _reading(reading_id=2, pump_id=2, stroke=np.nan, flow_lpm=55.0),  # setting not recorded
        ],
        ignore_index=True,
    )
    r = refer_readings(readings, pumps)
    assert len(r) == 2  # flagged readings stay in the frame
    assert r.loc[0, "q_th_lpm"] == pytest.approx(60.0)
    # Leakage does not shrink with stroke: eta_v,ref uses the full-stroke rated flow (domain.md sec. 4).
    assert r.loc[0, "eta_v_ref"] == pytest.approx(1 - 5.0 * r.loc[0, "referral_factor"] / 100.0)
    assert "displacement setting" in r.loc[1, "flag"]
    assert np.isnan(r.loc[1, "eta_v_ref"]) and np.isnan(r.loc[1, "slip_ref_lpm"])


@pytest.mark.parametrize(
    "change, words",
    [
        (dict(pressure_bar=0.0), "no working pressure"),
        (dict(pressure_bar=np.nan), "no working pressure"),
        (dict(nu40=np.nan), "no oil data"),
        (dict(flow_lpm=106.0), "flow above 105%"),
        (dict(speed_rpm=200.0, flow_lpm=10.0), "shaft speed outside 30%-130%"),
        (dict(pressure_bar=400.0), "pressure above 150%"),
        (dict(temp_c=140.0), "oil temperature outside"),
        (dict(hours=-5.0), "negative running hours"),
        (dict(flow_lpm=np.nan, drain_lpm=np.nan), "no outlet flow or case drain"),
    ],
)
def test_implausible_readings_are_flagged_not_dropped(change, words):
    r = refer_readings(_reading(**change), _pump())
    assert len(r) == 1
    assert words in r.loc[0, "flag"]
    assert np.isnan(r.loc[0, "slip_ref_lpm"])


def test_several_problems_are_all_named():
    r = refer_readings(_reading(pressure_bar=0.0, hours=-1.0), _pump())
    assert r.loc[0, "flag"] == "no working pressure recorded; negative running hours"


def test_flow_above_theory_within_noise_is_kept():
    r = refer_readings(_reading(flow_lpm=100.4), _pump())
    assert pd.isna(r.loc[0, "flag"]) and r.loc[0, "slip_lpm"] < 0


def test_multi_point_flow_test_slope_matches_scipy():
    points = pd.DataFrame(
        {"reading_id": [1, 1, 1], "pressure_bar": [50.0, 100.0, 150.0], "flow_lpm": [97.6, 95.1, 92.4]}
    )
    r = refer_readings(_reading(pressure_bar=207.0, flow_lpm=89.6, temp_c=60.0), _pump(), flow_points=points)
    ref = stats.linregress([50, 100, 150, 207], [97.6, 95.1, 92.4, 89.6])  # scipy reference slope
    assert r.loc[0, "flow_test_points"] == 4
    assert r.loc[0, "leak_lpm_per_bar"] == pytest.approx(-ref.slope, rel=1e-10)
    ratio = r.loc[0, "mu_pas"] / r.loc[0, "mu_ref_pas"]
    assert r.loc[0, "leak_lpm_per_bar_ref"] == pytest.approx(-ref.slope * ratio, rel=1e-10)


def test_many_readings_are_referred_in_one_pass_in_input_order():
    n = 1000
    rng = np.random.default_rng(3)
    readings = pd.concat([_reading()] * n, ignore_index=True)
    readings["reading_id"] = np.arange(n)
    readings["pressure_bar"] = rng.uniform(100, 250, n)
    readings["temp_c"] = rng.uniform(30, 70, n)
    r = refer_readings(readings, _pump())
    assert list(r["reading_id"]) == list(range(n))
    assert r["flag"].isna().all()
    assert np.allclose(r["slip_ref_lpm"], 10.0 * r["referral_factor"])


def test_reading_of_a_pump_not_on_record_is_flagged_for_that_reason_only():
    r = refer_readings(_reading(pump_id=42), _pump())
    assert r.loc[0, "flag"] == "pump not on record"
    assert np.isnan(r.loc[0, "eta_v_ref"])
