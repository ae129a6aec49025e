"""Status, reasons and the service-list order for invented pumps in known states; JSON records; purity."""

import json
import re
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import trend_synthetic as ts

from fleet.frames import READING_COLUMNS
from fleet.trend.engine import analyze_fleet, results_to_records
from fleet.trend.weibull import mean_residual_life

HPD = 16.0


def _pump_readings(pumps, pump_id, rng, *, eta_new=0.95, growth=0.0, n=40, start=ts.START, hpd=HPD, first_id):
    one = pumps[pumps["pump_id"] == pump_id]
    return ts.wear_readings(
        one,
        rng,
        n_readings=n,
        eta_new=np.array([eta_new]),
        growth_per_h=np.array([growth]),
        hours_per_day=np.array([hpd]),
        start=start,
        first_reading_id=first_id,
    )


@pytest.fixture(scope="module")
def fleet():
    rng = np.random.default_rng(2025)
    pumps = ts.make_pumps(16, rng)
    span_h = 39 * 7 * HPD  # 40 weekly readings
    limit_growth = np.log(0.15 / 0.05)  # ln(slip at limit / slip new) for eta 0.95 -> 0.85
    parts = {
        1: dict(),  # healthy
        2: dict(growth=limit_growth / (0.8 * span_h)),  # crossed at 80 % of its readings: past the limit
        3: dict(growth=limit_growth / (0.6 * span_h)),  # crossed earlier: further past
        4: dict(growth=limit_growth / (span_h + 500.0)),  # crossing 500 h ahead: due soon
        5: dict(growth=limit_growth / (span_h + 1000.0)),  # 1000 h ahead: due soon, later
        6: dict(n=3),  # too few readings for a trend
        8: dict(),  # case drain jump on the last reading
        9: dict(),  # hot oil on the last reading
        10: dict(),  # dirty oil
        11: dict(),  # water in oil
        12: dict(),  # lab result late
        13: dict(start=ts.START - pd.Timedelta(days=60)),  # last reading long ago
        14: dict(),  # its last reading could not be referred
        15: dict(growth=5e-4, hpd=4.0),  # wearing fast, but its limit is beyond the horizon at 4 h/day
        16: dict(eta_new=0.78, n=2),  # two readings only, both below the limit
    }
    readings = pd.concat(
        [_pump_readings(pumps, pid, rng, first_id=pid * 1000, **kw) for pid, kw in parts.items()], ignore_index=True
    )  # pump 7 has no readings at all
    last = readings.groupby("pump_id")["taken_at"].idxmax()
    readings.loc[last[8], "drain_lpm"] *= 3.0
    readings.loc[last[9], "temp_c"] = 86.0
    readings.loc[last[14], "pressure_bar"] = 0.0
    now = readings.loc[readings["pump_id"] == 1, "taken_at"].max() + pd.Timedelta(days=2)
    samples = ts.clean_samples(pumps, now - pd.Timedelta(days=30))
    samples.loc[samples["machine_id"] == 10, ["code_4", "code_6", "code_14"]] = [20.0, 18.0, 15.0]
    samples.loc[samples["machine_id"] == 11, "water_ppm"] = 800.0
    late = pd.DataFrame(
        {
            "machine_id": [12],
            "sampled_at": [now - pd.Timedelta(days=20)],
            "reported_at": [pd.NaT],
            "code_4": [np.nan],
            "code_6": [np.nan],
            "code_14": [np.nan],
            "low_count": [False],
            "water_ppm": [np.nan],
            "viscosity_40": [np.nan],
        }
    )
    samples = pd.concat([samples, late], ignore_index=True)
    analysis = analyze_fleet(pumps, readings, ts.no_events(), samples, now=now)
    return analysis, now


def _reasons(res, pid) -> str:
    return " | ".join(res.loc[pid, "reasons"])


def test_every_pump_has_a_status_and_at_least_one_full_sentence_reason(fleet):
    res = fleet[0].results
    assert len(res) == 16
    assert res["reasons"].map(len).min() >= 1
    assert all(s.endswith(".") and s[0].isupper() or s.startswith("eta_v") for rs in res["reasons"] for s in rs)
    assert set(res["status"]) <= {"past_limit", "due_soon", "watch", "healthy"}


def test_healthy_pump_says_why(fleet):
    res = fleet[0].results
    assert res.loc[1, "status"] == "healthy"
    assert re.match(r"Volumetric efficiency at reference 9\d\.\d %; no limit expected", res.loc[1, "reasons"][0])
    assert "within 12 weeks" in res.loc[1, "reasons"][0]


def test_too_little_data_gives_not_enough_data_and_null_hours(fleet):
    res = fleet[0].results
    for pid in (6, 7):
        assert res.loc[pid, "status"] == "watch"
        assert "not enough data" in _reasons(res, pid).lower()
        assert np.isnan(res.loc[pid, "hours_to_limit"]) and np.isnan(res.loc[pid, "hours_to_limit_low"])
        assert pd.isna(res.loc[pid, "limit_date"]) and res.loc[pid, "governing_limit"] is None
    assert "3 usable readings" in _reasons(res, 6)
    assert "Not enough data: no readings yet." in res.loc[7, "reasons"]


def test_past_limit_first_furthest_past_first(fleet):
    res = fleet[0].results
    assert (res.loc[[2, 3, 16], "status"] == "past_limit").all()
    assert res.loc[3, "eta_v_ref"] < res.loc[2, "eta_v_ref"] < 0.85
    # Pump 16 has no trend (two readings): its last usable reading decides, and it says so.
    assert res.loc[16, "last_eta_v_ref"] == pytest.approx(0.78, abs=0.01)
    assert res.loc[16, "eta_v_ref"] == res.loc[16, "last_eta_v_ref"]
    assert res.loc[16, "eta_v_ref_source"] == "last_reading"
    assert res.loc[2, "eta_v_ref_source"] == "trend" and np.isnan(res.loc[16, "hours_to_limit"])
    assert "too few readings for a trend" in _reasons(res, 16)
    # Furthest past first: slip over its limit is 2.1x (pump 3), 1.47x (16), 1.3x (2).
    assert (res.loc[3, "rank"], res.loc[16, "rank"], res.loc[2, "rank"]) == (1, 2, 3)
    assert res.loc[2, "hours_to_limit"] == 0.0
    assert "at or below its limit 85.0 %" in _reasons(res, 2)


def test_due_soon_ordered_by_lower_bound_date(fleet):
    res = fleet[0].results
    assert res.loc[4, "status"] == "due_soon" and res.loc[5, "status"] == "due_soon"
    assert res.loc[4, "limit_date_low"] <= res.loc[5, "limit_date_low"]
    assert (res.loc[4, "rank"], res.loc[5, "rank"]) == (4, 5)
    assert res.loc[4, "hours_to_limit_low"] <= res.loc[4, "hours_to_limit"] <= res.loc[4, "hours_to_limit_high"]
    assert res.loc[4, "hours_to_limit"] == pytest.approx(500.0, rel=0.5)
    assert res.loc[4, "governing_limit"] == "eta_v" and res.loc[4, "confidence"] == 0.9
    # The date follows from the pump's own hours per day, counted from its last reading.
    days = res.loc[4, "hours_to_limit"] / res.loc[4, "hours_per_day"]
    expected = (res.loc[4, "last_reading_at"] + pd.Timedelta(days=days)).normalize()
    assert res.loc[4, "limit_date"] == expected
    assert "volumetric efficiency limit is expected" in _reasons(res, 4)


@pytest.mark.parametrize(
    "pid, words",
    [
        (8, "Case drain jumped to"),
        (9, "Oil at 86 degC on the last reading, above the 80 degC limit."),
        (10, "The latest oil sample, 20/18/15, is 2 steps dirtier than the 18/16/13 target."),
        (11, "Water in the oil is 800 ppm, above 500 ppm."),
        # Sampled 20 days before the analysis (the fixture above); late after the default 14.
        (12, "has waited 20 days for its lab result (late after 14 days)."),
        (13, "readings are due every 14 days"),
        (14, "The last reading could not be referred: no working pressure recorded."),
        (15, "Volumetric efficiency is falling fast"),
    ],
)
def test_watch_rules_with_their_sentences(fleet, pid, words):
    res = fleet[0].results
    assert res.loc[pid, "status"] == "watch", _reasons(res, pid)
    assert words in _reasons(res, pid)


def test_rank_runs_through_status_groups(fleet):
    res = fleet[0].results.sort_values("rank")
    assert list(res["rank"]) == list(range(1, 17))
    order = {"past_limit": 0, "due_soon": 1, "watch": 2, "healthy": 3}
    assert res["status"].map(order).is_monotonic_increasing


def test_energy_figures_follow_the_handbook_formulas(fleet):
    analysis, _ = fleet
    row = analysis.results.loc[1]
    fit = analysis.fits.set_index("pump_id").loc[1]
    # Leakage power p Q_s / 600 (domain.md sec. 8) at the typical pressure, slip scaled linearly with pressure.
    slip_work = fit["slip_current_lpm"] * row["typical_pressure_bar"] / ts.RATED_PRESSURE_BAR
    assert row["leakage_kw"] == pytest.approx(row["typical_pressure_bar"] * slip_work / 600.0)
    # Yearly cost = P_loss / eta_motor x running hours per year x tariff (domain.md sec. 8).
    expected_cost = row["leakage_kw"] / 0.93 * row["hours_per_day"] * 365 * 0.15
    assert row["energy_cost_per_year"] == pytest.approx(expected_cost)
    worn = analysis.results.loc[3]
    assert worn["overhaul_saving_per_year"] > 0
    assert worn["overhaul_payback_years"] == pytest.approx(4000.0 / worn["overhaul_saving_per_year"])
    total = analysis.totals["energy_cost_per_year"]["EUR"]
    assert total == pytest.approx(analysis.results["energy_cost_per_year"].sum())


def test_records_are_json_ready(fleet):
    records = results_to_records(fleet[0].results)
    text = json.dumps(records, allow_nan=False)
    assert len(records) == 16
    by_id = {r["pump_id"]: r for r in json.loads(text)}
    assert by_id[7]["hours_to_limit"] is None and by_id[7]["limit_date"] is None
    assert isinstance(by_id[4]["limit_date"], str) and len(by_id[4]["limit_date"]) == 10
    for key in (
        "pump",
        "status",
        "reasons",
        "eta_v_ref",
        "eta_v_decline_per_1000h",
        "drain_pct_ref",
        "hours_to_limit",
        "hours_to_limit_low",
        "hours_to_limit_high",
        "limit_date",
        "governing_limit",
        "prior_hours_to_overhaul",
        "energy_cost_per_year",
        "rank",
    ):
        assert key in by_id[1]


def test_given_priors_are_used_as_is(fleet):
    analysis, now = fleet
    priors = pd.DataFrame(
        {
            "beta": [2.5],
            "alpha": [20000.0],
            "b10_hours": [np.nan],
            "n_failures": [9],
            "n_suspensions": [3],
            "note": [None],
        },
        index=pd.Index(["axial_piston"], name="kind"),
    )
    one = analysis.readings.loc[analysis.readings["pump_id"] == 1, list(READING_COLUMNS)]
    pumps = ts.make_pumps(16, np.random.default_rng(2025))
    again = analyze_fleet(pumps[pumps["pump_id"] == 1], one, None, None, now=now, priors=priors)
    row = again.results.loc[1]
    assert row["prior_hours_to_overhaul"] == pytest.approx(mean_residual_life(row["age_hours"], 2.5, 20000.0))
    assert row["eta_v_ref"] == pytest.approx(analysis.results.loc[1, "eta_v_ref"])
    # Without a fleet history the fleet figure is empty, never invented.
    assert np.isnan(analysis.results.loc[1, "prior_hours_to_overhaul"])
    assert "No fleet life figures for axial_piston" in analysis.priors.loc["axial_piston", "note"]


def test_core_imports_no_web_or_database_code():
    code = (
        "import sys, fleet.trend.engine, fleet.trend.status; "
        "bad = [m for m in sys.modules if m.split('.')[0] in ('flask', 'sqlalchemy') "
        "or m.startswith(('fleet.db', 'fleet.web', 'fleet.services'))]; print(bad)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
