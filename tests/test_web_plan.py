"""Overhaul plan: timeline, shutdown windows and fits, spares from the fleet Weibull, cost and payback."""

import csv
import io
from datetime import datetime

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sqlalchemy import select

from fleet.db.models import AnalysisResult, FleetPrior, Machine, Pump, ShutdownWindow
from fleet.planning.spares import demand_distribution, spares_to_hold
from fleet.planning.windows import match_windows
from fleet.services.pages.plan import CSV_COLUMNS, overhaul_chances

KEYS = {"weeks", "today", "horizon_end", "pumps", "windows", "fit_words", "at_risk", "kinds", "spares_cover",
        "totals", "scopes", "window_form", "window_errors", "without_forecast"}


def test_plan_page_chart_table_caution_and_twins(client):
    page = client.get("/plan")
    assert page.status_code == 200
    html = page.get_data(as_text=True)
    assert "Before you work on a pump" in html
    assert 'id="plan-chart"' in html
    assert '<script src="/assets/plotly.min.js"></script>' in html and "cdn.plot.ly" not in html
    assert 'href="/plan.json?' not in html and 'href="/plan.json"' in html and 'href="/plan.csv"' in html

    data = client.get("/plan.json").get_json()
    assert set(data) == KEYS and data["weeks"] == 26
    assert set(data["pumps"][0]) == {*CSV_COLUMNS, "kind_label", "window_label"} - {"window_name"}
    horizon = data["horizon_end"]
    for row in data["pumps"]:
        assert row["status"] == "past_limit" or min(row["limit_date"], row["limit_date_low"] or "9") <= horizon
        assert row["pump"] in html
    # Pumps past their limit have no window yet, so they are flagged as at risk.
    assert set(data["at_risk"]) >= {r["pump"] for r in data["pumps"] if r["status"] == "past_limit"}
    assert "At risk before the next window" in html

    twin = client.get("/plan.csv")
    text = twin.get_data(as_text=True)
    assert text.splitlines()[0] == ",".join(CSV_COLUMNS)
    assert [r["pump"] for r in csv.DictReader(io.StringIO(text))] == [r["pump"] for r in data["pumps"]]


def test_a_pump_past_its_limit_is_planned_at_its_crossing_not_its_last_reading(client, demo_db):
    """The plan (page, JSON, CLI text) shows when a past-limit pump's trend crossed its limit, which limit it was
    and the bounds, as the stored analysis estimated them; not its last reading's date (its limit_date)."""
    from fleet.commands.jobs import plan_text

    with demo_db.sessions() as session:
        stored = {serial: detail for serial, status, detail in session.execute(
            select(Pump.serial, AnalysisResult.status, AnalysisResult.detail).join(Pump)) if status == "past_limit"}
    data = client.get("/plan.json").get_json()
    past = [r for r in data["pumps"] if r["status"] == "past_limit"]
    assert past and {r["pump"] for r in past} == set(stored)
    html = client.get("/plan").get_data(as_text=True)
    text = plan_text(data)
    crossed = [r for r in past if r["crossed_date"]]
    assert crossed  # the invented demo has pumps whose trend crossed a limit
    for row in crossed:
        detail = stored[row["pump"]]
        assert (row["crossed_limit"], row["crossed_date"], row["crossed_date_low"], row["crossed_date_high"]) == (
            detail["crossed_limit"], detail["crossed_date"], detail["crossed_date_low"], detail["crossed_date_high"])
        assert row["crossed_date"] < row["limit_date"]  # before the last reading
        assert f"crossed around {row['crossed_date']}" in html
        assert f"crossed ~{row['crossed_date']} ({row['crossed_date_low']} - " in text
    # Those that crossed longest ago come first.
    assert [r["crossed_date_low"] for r in crossed] == sorted(r["crossed_date_low"] for r in crossed)


def test_pumps_without_a_trend_of_their_own_are_named_with_the_reason(client, demo_db):
    """A pump installed but with too little data for its own trend has no date to be planned by: the plan (page,
    JSON, command line) names it and says why, rather than leaving it out unseen."""
    from fleet.commands.jobs import plan_text
    from fleet.services.transfer.importing import import_table
    from fleet.services.writes import perform

    assert client.get("/plan.json").get_json()["without_forecast"] == []  # every demo pump has its trend
    # A new pump on the invented demo plant's press-2, no readings yet.
    row = {"pump": "NEW-1", "site": "East Yard", "machine": "press-2", "position": "spare bay (invented)",
           "kind": "vane", "variable": "no", "displacement": 20, "rated_speed": 1500, "rated_pressure": 160,
           "oil": "house mineral HM 46", "viscosity_40": 46, "viscosity_100": 6.8, "installed_at": "2026-01-05"}
    perform(demo_db.sessions, lambda session: import_table(session, "pumps", pd.DataFrame([row])))
    data = client.get("/plan.json").get_json()
    assert [r["pump"] for r in data["without_forecast"]] == ["NEW-1"]
    assert "NEW-1" not in [r["pump"] for r in data["pumps"]]
    new = data["without_forecast"][0]
    assert new["why"] == "Not enough data: no readings yet." and new["machine"] == "press-2"
    html = client.get("/plan").get_data(as_text=True)
    assert "Pumps the plan cannot place" in html and "Not enough data: no readings yet." in html
    text = plan_text(data)
    assert "Pumps the plan cannot place (1)" in text and "NEW-1" in text


def test_the_plan_csv_rounds_its_figures_and_names_its_windows(client):
    data = client.get("/plan.json?weeks=520").get_json()
    rows = list(csv.DictReader(io.StringIO(client.get("/plan.csv?weeks=520").get_data(as_text=True))))
    assert len(rows) == len(data["pumps"])
    for row, full in zip(rows, data["pumps"], strict=True):
        for column in ("hours_to_limit", "overhaul_cost", "energy_cost_per_year", "overhaul_saving_per_year"):
            assert row[column] == ("" if full[column] is None else str(int(round(full[column])))), column
        payback = full["overhaul_payback_years"]
        assert row["overhaul_payback_years"] == ("" if payback is None else str(round(payback, 1)))
        assert row["window_name"] == (full["window_label"] or "")
    assert any(r["window_name"] for r in rows)  # the invented demo has shutdown windows ahead


def test_a_longer_horizon_holds_at_least_the_same_pumps(client):
    short = {r["pump"] for r in client.get("/plan.json?weeks=4").get_json()["pumps"]}
    long = client.get("/plan.json?weeks=520").get_json()
    assert long["weeks"] == 520 and short <= {r["pump"] for r in long["pumps"]}
    assert len(long["pumps"]) > len(short)


def test_totals_add_up_cost_and_payback(client):
    data = client.get("/plan.json").get_json()
    (total,) = data["totals"]  # the demo plant keeps one currency
    planned = [r for r in data["pumps"] if r["fit"] != "beyond_horizon"]
    assert total["pumps"] == len(planned)
    costed = [r for r in planned if r["overhaul_cost"] is not None]
    assert total["overhaul_cost"] == pytest.approx(sum(r["overhaul_cost"] for r in costed))
    saving = sum(r["overhaul_saving_per_year"] or 0 for r in costed)
    # Payback = cost / yearly saving (simple payback, engineering-economics definition).
    assert total["payback_years"] == pytest.approx(total["overhaul_cost"] / saving)


def test_windows_are_added_fitted_and_removed(client, demo_db):
    data = client.get("/plan.json").get_json()
    due = next(r for r in data["pumps"] if r["status"] != "past_limit")
    with demo_db.sessions() as s:
        machine_id = s.scalar(select(Machine.id).where(Machine.name == due["machine"]))
    low = datetime.fromisoformat(due["limit_date_low"])
    start = (low - pd.Timedelta(days=10)).strftime("%Y-%m-%d")
    end = (low - pd.Timedelta(days=9)).strftime("%Y-%m-%d")
    response = client.post("/plan/windows", data={"scope": f"machine:{machine_id}", "starts_at": start,
                                                  "ends_at": end, "note": "invented spring stop"})
    assert response.status_code == 302
    data = client.get("/plan.json").get_json()
    row = next(r for r in data["pumps"] if r["pump"] == due["pump"])
    assert row["fit"] == "in_time" and row["window_starts"] == start
    assert due["pump"] not in data["at_risk"]
    assert "invented spring stop" in client.get("/plan").get_data(as_text=True)

    # An end before the start is refused; the typed values stay in the form.
    response = client.post("/plan/windows", data={"scope": f"machine:{machine_id}", "starts_at": end,
                                                  "ends_at": start, "note": "typed note"})
    assert response.status_code == 400
    html = response.get_data(as_text=True)
    assert "ends_at: is before the start" in html
    assert f'value="{end}"' in html and 'value="typed note"' in html
    with demo_db.sessions() as s:
        windows = s.scalars(select(ShutdownWindow)).all()
        assert [w.note for w in windows].count("invented spring stop") == 1  # beside the demo's own windows
        window_id = next(w.id for w in windows if w.note == "invented spring stop")
    assert client.post(f"/plan/windows/{window_id}/delete").status_code == 302
    assert client.post(f"/plan/windows/{window_id}/delete").status_code == 404
    with demo_db.sessions() as s:
        assert len(s.scalars(select(ShutdownWindow)).all()) == len(windows) - 1


def test_match_windows_prefers_the_last_window_before_the_early_bound():
    pumps = pd.DataFrame({
        "pump_id": [1, 2, 3, 4, 5],
        "site_id": [1, 3, 1, 2, 1],
        "machine_id": [10, 10, 11, 20, 10],
        "limit_date": ["2027-03-01", "2027-01-20", "2027-01-05", "2027-03-01", None],
        "limit_date_low": ["2027-02-15", "2027-01-10", "2027-01-01", "2027-02-01", None],
        "past_limit": [False, False, False, False, False],
    })
    windows = pd.DataFrame({
        "window_id": [100, 101, 102, 103],
        "site_id": [np.nan, np.nan, 1, np.nan],
        "machine_id": [10, 10, np.nan, 11],
        "starts_at": pd.to_datetime(["2027-01-15", "2027-02-01", "2027-01-02", "2027-02-01"]),
        "ends_at": pd.to_datetime(["2027-01-16", "2027-02-02", "2027-01-03", "2027-02-02"]),
    })
    fits = match_windows(pumps, windows, "2026-12-01")
    assert fits.loc[1, "fit"] == "in_time" and fits.loc[1, "window_id"] == 101  # last before 02-15
    assert fits.loc[2, "fit"] == "tight" and fits.loc[2, "window_id"] == 100  # after 01-10, before 01-20
    assert fits.loc[3, "fit"] == "tight" and fits.loc[3, "window_id"] == 102  # site-wide window covers it
    assert fits.loc[4, "fit"] == "at_risk" and np.isnan(fits.loc[4, "window_id"])  # no window at site 2
    assert fits.loc[5, "fit"] == "no_forecast"
    assert fits.loc[1, "next_window_id"] == 102


def test_demand_distribution_of_equal_chances_is_the_binomial():
    # A Poisson-binomial with equal probabilities is the binomial distribution (any probability text);
    # reference values from scipy.stats.binom.
    p = [0.3] * 10
    assert demand_distribution(p) == pytest.approx(stats.binom.pmf(np.arange(11), 10, 0.3), abs=1e-12)
    for cover in (0.5, 0.9, 0.95, 0.99):
        assert spares_to_hold(p, cover) == int(stats.binom.ppf(cover, 10, 0.3))


def test_demand_distribution_mean_and_variance_of_unequal_chances():
    # Poisson-binomial: mean = sum p, variance = sum p (1 - p) (sums of independent Bernoulli variables).
    p = np.array([0.05, 0.1, 0.5, 0.8, 0.33, np.nan])
    pmf = demand_distribution(p)
    k = np.arange(len(pmf))
    known = p[np.isfinite(p)]
    assert pmf.sum() == pytest.approx(1.0)
    assert (k * pmf).sum() == pytest.approx(known.sum())
    assert ((k - known.sum()) ** 2 * pmf).sum() == pytest.approx((known * (1 - known)).sum())
    assert spares_to_hold([], 0.9) == 0
    with pytest.raises(ValueError):
        spares_to_hold(p, 1.0)


def test_overhaul_chance_is_the_conditional_weibull_probability():
    # Weibull beta 2.656, alpha 3648 h (domain check data, fitted with scipy); reference: scipy.stats.weibull_min,
    # P(T <= t + dt | T > t) = 1 - S(t + dt) / S(t).
    beta, alpha = 2.656, 3648.0
    age = np.array([0.0, 1000.0, 3000.0, 6000.0])
    per_day = np.array([8.0, 16.0, 20.0, 24.0])
    weeks = 13
    dist = stats.weibull_min(beta, scale=alpha)
    dt = per_day * 7 * weeks
    expected = 1 - dist.sf(age + dt) / dist.sf(age)
    assert overhaul_chances(age, per_day, weeks, beta, alpha) == pytest.approx(expected, rel=1e-9)


def test_kind_outlook_uses_the_stored_fleet_weibull(client, demo_db):
    with demo_db.sessions.begin() as s:
        prior = s.get(FleetPrior, "vane")
        prior.detail = {**prior.detail, "beta": 2.656, "alpha": 3648.0, "b10_hours": 1564.0}
        rows = s.execute(select(AnalysisResult.detail).join(Pump, Pump.id == AnalysisResult.pump_id)
                         .where(Pump.kind == "vane")).all()
        ages = np.array([r.detail["age_hours"] for r in rows], dtype=float)
        per_day = np.array([r.detail["hours_per_day"] or np.nan for r in rows], dtype=float)
    data = client.get("/plan.json?weeks=8").get_json()
    vane = next(k for k in data["kinds"] if k["kind"] == "vane")
    dist = stats.weibull_min(2.656, scale=3648.0)  # reference: scipy.stats
    chances = 1 - dist.sf(ages + per_day * 56) / dist.sf(ages)
    assert vane["expected_overhauls"] == pytest.approx(np.nansum(chances), rel=1e-9)
    assert vane["spares_to_hold"] == spares_to_hold(chances)
    assert vane["b10_hours"] == 1564.0
    html = client.get("/plan?weeks=8").get_data(as_text=True)
    assert f"{vane['expected_overhauls']:,.2f}" in html


def test_a_pump_expected_after_the_horizon_gets_no_window():
    """On the plan only because its band's early bound falls inside the horizon: no overhaul is planned for it."""
    pumps = pd.DataFrame({"pump_id": [1, 2], "site_id": [1, 1], "machine_id": [10, 10],
                          "limit_date": ["2033-08-08", "2027-03-01"], "limit_date_low": ["2027-02-01", "2027-02-15"],
                          "past_limit": [False, False]})
    windows = pd.DataFrame({"window_id": [100], "site_id": [1.0], "machine_id": [np.nan],
                            "starts_at": pd.to_datetime(["2027-01-15"]), "ends_at": pd.to_datetime(["2027-01-16"])})
    fits = match_windows(pumps, windows, "2026-12-01", horizon_end="2027-06-01")
    assert fits.loc[1, "fit"] == "beyond_horizon" and np.isnan(fits.loc[1, "window_id"])
    assert fits.loc[2, "fit"] == "in_time" and fits.loc[2, "window_id"] == 100
    assert match_windows(pumps, windows, "2026-12-01").loc[1, "fit"] == "in_time"  # no horizon given


def test_the_plan_puts_no_window_on_a_pump_expected_after_its_horizon(client):
    for weeks in (26, 52):
        data = client.get(f"/plan.json?weeks={weeks}").get_json()
        for row in data["pumps"]:
            later = row["status"] != "past_limit" and row["limit_date"] and row["limit_date"][:10] > data["horizon_end"]
            assert (row["fit"] == "beyond_horizon") == bool(later), row
            if later:
                assert row["window"] is None and row["pump"] not in data["at_risk"]
        later = sum(row["fit"] == "beyond_horizon" for row in data["pumps"])
        html = client.get(f"/plan?weeks={weeks}").get_data(as_text=True)
        assert (f"; {later} pump(s) expected after the horizon not counted" in html) == bool(later and data["totals"])
