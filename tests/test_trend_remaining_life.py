"""Hours to limits, calendar dates, chart bands, and the fleet-size run time."""


import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import trend_synthetic as ts

from fleet.trend.engine import analyze_fleet
from fleet.trend.linear import grouped_wls
from fleet.trend.remaining_life import (
    dates_at_hours,
    interval_hours_per_day,
    limit_dates,
    limit_flows_lpm,
    trend_band,
)
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import service_order_keys, service_rank


def test_limits_turn_into_referred_flows():
    flows = limit_flows_lpm(eta_v_limit=0.85, drain_limit_pct=6.0, rated_flow_lpm=100.0, max_flow_lpm=120.0)
    assert flows["slip"] == pytest.approx(15.0)  # (1 - 0.85) x 100 L/min
    assert flows["drain"] == pytest.approx(7.2)  # 6 % of 120 L/min


def test_trend_band_matches_statsmodels_mean_interval_on_the_log_scale():
    rng = np.random.default_rng(4)
    h = np.linspace(0, 4000, 15)
    log_slip = np.log(5.0) + 1e-4 * h + rng.normal(0, 0.05, h.size)
    fit = grouped_wls(np.zeros(h.size, dtype=int), h, log_slip, np.ones(h.size), 1)
    row = {f"slip_{k}": getattr(fit, k)[0] for k in ("a", "b", "var_a", "var_b", "cov_ab", "scale", "dof", "n_points")}
    grid = np.array([0.0, 2000.0, 6000.0])
    band = trend_band(row, grid, qmax=100.0, confidence=0.90)
    ols = sm.OLS(log_slip, sm.add_constant(h)).fit()  # statsmodels reference
    ref = ols.get_prediction(sm.add_constant(grid)).summary_frame(alpha=0.10)
    assert np.allclose(band["mean"], 1 - np.exp(ref["mean"]) / 100.0, rtol=1e-10)
    # A higher slip is a lower efficiency: the band's low edge comes from the upper slip limit.
    assert np.allclose(band["low"], 1 - np.exp(ref["mean_ci_upper"]) / 100.0, rtol=1e-10)
    assert np.allclose(band["high"], 1 - np.exp(ref["mean_ci_lower"]) / 100.0, rtol=1e-10)
    assert (np.diff(band["high"] - band["low"])[1:] > 0).all()  # the band widens away from the data


def test_hours_per_day_uses_recent_hour_meter_history():
    days = np.array([0, 100, 200, 260, 300])
    hours = np.array([0, 2400, 4800, 5040, 5200])  # 24 h/day, then 4 h/day over the last 100 days
    taken = (pd.Timestamp("2025-01-01") + pd.to_timedelta(days, unit="D")).to_numpy()
    group = np.zeros(len(days), dtype=np.int64)  # one pump interval
    per_day = interval_hours_per_day(group, taken, hours.astype(float), 1, AnalysisSettings())
    assert per_day[0] == pytest.approx(400.0 / 100.0)
    # Fallback to the whole interval when the recent window spans less than a week.
    short = interval_hours_per_day(group, taken, hours.astype(float), 1, AnalysisSettings(hours_per_day_window_days=3))
    assert short[0] == pytest.approx(5200.0 / 300.0)
    dates = limit_dates(pd.Series([pd.Timestamp("2025-06-01 14:00")]), [100.0], [4.0])
    assert dates.iloc[0] == pd.Timestamp("2025-06-26")


def test_limit_dates_on_plain_arrays_equal_pandas_sum_and_normalize():
    # Reference: the same sum in pandas' own terms (a Series of times plus to_timedelta's offsets, then
    # dt.normalize), which limit_dates did before it worked on numpy arrays. Times before 1970 and at midnight,
    # a missing time, rates of zero, negative and missing, and hours beyond the 200-year cap.
    rng = np.random.default_rng(12)
    n = 400
    last = pd.Series(pd.to_datetime("1965-01-01") + pd.to_timedelta(rng.uniform(0, 80 * 365, n), unit="D"))
    last.iloc[:5] = [pd.NaT, pd.Timestamp("1969-12-31 23:59:59.999999"), pd.Timestamp("2024-02-29"),
                     pd.Timestamp("1970-01-01"), pd.Timestamp("2031-06-30 23:59")]
    last = last.astype("datetime64[us]")
    hours = rng.uniform(0, 90_000, n)
    hours[5:10] = [np.nan, 0.0, 1e9, 24.0, 1e-7]
    rate = rng.uniform(0, 24, n)
    rate[10:14] = [0.0, -3.0, np.nan, 24.0]
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = np.isfinite(hours) & np.isfinite(rate) & (rate > 0)
        days = np.minimum(np.where(ok, hours / np.where(ok, rate, 1.0), np.nan), 365.0 * 200)
    expected = (last.reset_index(drop=True) + pd.Series(pd.to_timedelta(days, unit="D"))).dt.normalize()
    pd.testing.assert_series_equal(limit_dates(last, hours, rate), expected)


def _reference_dates_at_hours(readings, keys, interval_hours, per_day):
    """dates_at_hours as it was, on pandas' merge_asof (the readings before and after each target by hours)."""
    by = ["pump_id", "interval_no"]
    target = keys[by].reset_index(drop=True).astype(np.int64).assign(
        h=np.asarray(interval_hours, dtype=float), rate=np.asarray(per_day, dtype=float), row=np.arange(len(keys))
    )
    r = readings.loc[
        np.isfinite(pd.to_numeric(readings["interval_hours"], errors="coerce")) & readings["taken_at"].notna(),
        ["pump_id", "interval_no", "interval_hours", "taken_at"],
    ].rename(columns={"interval_hours": "h"})
    r = r.astype({"pump_id": np.int64, "interval_no": np.int64})
    r = r.assign(h=r["h"].astype(float), taken_at=pd.to_datetime(r["taken_at"])).sort_values("h", kind="stable")
    known = target[np.isfinite(target["h"])].sort_values("h", kind="stable")
    before = pd.merge_asof(known, r.rename(columns={"h": "h_b", "taken_at": "t_b"}), left_on="h", right_on="h_b",
                           by=by, direction="backward")
    after = pd.merge_asof(known, r.rename(columns={"h": "h_f", "taken_at": "t_f"}), left_on="h", right_on="h_f",
                          by=by, direction="forward")
    m = before.set_index("row")[["h", "rate", "h_b", "t_b"]].join(after.set_index("row")[["h_f", "t_f"]])
    span_days = (m["t_f"] - m["t_b"]).dt.total_seconds() / 86400.0
    with np.errstate(invalid="ignore", divide="ignore"):
        share = ((m["h"] - m["h_b"]) / (m["h_f"] - m["h_b"])).where(m["h_f"] > m["h_b"], 0.0)
        inside = m["t_b"] + pd.to_timedelta(share * span_days.fillna(0.0), unit="D")
        ahead = m["t_b"] + pd.to_timedelta(((m["h"] - m["h_b"]) / m["rate"]).where(m["rate"] > 0), unit="D")
        behind = m["t_f"] - pd.to_timedelta(((m["h_f"] - m["h"]) / m["rate"]).where(m["rate"] > 0), unit="D")
    date = inside.where(m["t_b"].notna() & m["t_f"].notna(), ahead.where(m["t_b"].notna(), behind))
    return date.reindex(range(len(keys))).dt.normalize().reset_index(drop=True)


def test_dates_at_hours_on_arrays_equal_the_merge_asof_code():
    # Reference: the merge_asof code dates_at_hours was before it found the readings around each target on
    # arrays, kept above (common practice, no source). Invented readings of three pumps, two intervals each, with
    # equal hour-meter values (the last before and the first after must be taken), readings without hours or
    # time, and targets before the first reading, after the last, on a reading, between two, without hours, in an
    # interval without readings, at rates of zero and missing.
    rng = np.random.default_rng(31)
    rows = []
    for pump in (7, 3, 11):
        for interval in (0, 1):
            hours = np.sort(rng.uniform(0, 5000, 40)).round(0)
            hours[10:13] = hours[10]  # equal hour-meter values
            taken = pd.Timestamp("2024-01-01") + pd.to_timedelta(hours / 14.0 + rng.uniform(0, 0.2, 40), unit="D")
            for h, t in zip(hours, taken, strict=True):
                rows.append((pump, interval, h, t))
    readings = pd.DataFrame(rows, columns=["pump_id", "interval_no", "interval_hours", "taken_at"])
    readings = readings.sample(frac=1.0, random_state=4).reset_index(drop=True)  # not in hour order
    readings.loc[3, "interval_hours"] = np.nan
    readings.loc[5, "taken_at"] = pd.NaT
    readings["taken_at"] = readings["taken_at"].astype("datetime64[us]")
    n = 300
    keys = pd.DataFrame({"pump_id": rng.choice([7, 3, 11, 5], n), "interval_no": rng.choice([0, 1, 2], n)})
    hours = rng.uniform(-500, 7000, n)
    hours[:6] = [np.nan, -10.0, 0.0, 9000.0, readings["interval_hours"].iloc[0], readings["interval_hours"].iloc[20]]
    on_tie = readings.loc[readings.duplicated(["pump_id", "interval_no", "interval_hours"], keep=False)]
    keys.loc[6:8, ["pump_id", "interval_no"]] = on_tie[["pump_id", "interval_no"]].to_numpy()[:3]
    hours[6:9] = on_tie["interval_hours"].to_numpy()[:3]
    rate = rng.uniform(0, 24, n)
    rate[9:12] = [0.0, np.nan, -1.0]
    got = dates_at_hours(readings, keys, hours, rate)
    want = _reference_dates_at_hours(readings, keys, hours, rate)
    pd.testing.assert_series_equal(got, want)
    assert got.notna().sum() > 120 and got.isna().any()
    # A pump's three figures alone, as the engine dates a crossing passed.
    one = readings[readings["pump_id"] == 3]
    keys3 = pd.DataFrame({"pump_id": [3, 3, 3], "interval_no": [1, 1, 1]})
    pd.testing.assert_series_equal(dates_at_hours(one, keys3, [400.0, 2500.5, np.nan], [9.0] * 3),
                                   _reference_dates_at_hours(one, keys3, [400.0, 2500.5, np.nan], [9.0] * 3))


def test_dates_at_hours_keeps_the_merge_asof_codes_time_unit_at_the_edges():
    # Reference: the merge_asof code above (common practice, no source). pandas picks a time unit from the values
    # (whole days from to_timedelta give a coarser one; Series.where keeps the first's where the others fit), so
    # the unit of the answer follows the figures: whole-day offsets, no readings, one, none matching, no targets.
    keys = pd.DataFrame({"pump_id": [1, 1, 2, 2, 2], "interval_no": [0, 0, 0, 0, 0]})
    readings = pd.DataFrame({"pump_id": [2, 2], "interval_no": [0, 0], "interval_hours": [1.0, 5.0],
                             "taken_at": pd.to_datetime(["2024-01-01", "2024-02-01"]).astype("datetime64[us]")})
    for rows in (readings, readings.iloc[:0], readings.iloc[:1], readings.astype({"taken_at": "datetime64[ns]"})):
        for targets in (keys, keys.iloc[:2], keys.iloc[:0], keys.iloc[2:4]):
            hours = [3.0, np.nan, 0.5, 7.0, 5.0][:len(targets)]
            rate = [2.0] * len(targets)
            pd.testing.assert_series_equal(dates_at_hours(rows, targets, hours, rate),
                                           _reference_dates_at_hours(rows, targets, hours, rate))
    got = dates_at_hours(readings, keys, [3.0, np.nan, 0.5, 7.0, 5.0], [2.0] * 5)
    assert got.iloc[4] == pd.Timestamp("2024-02-01") and got.iloc[3] == pd.Timestamp("2024-02-02")


def test_service_rank_works_on_stored_records_with_text_dates():
    frame = pd.DataFrame(
        {
            "status": ["healthy", "due_soon", "past_limit", "due_soon", "watch", "past_limit"],
            "past_margin": [np.nan, np.nan, 0.1, np.nan, np.nan, 0.4],
            "limit_date_low": [None, "2025-09-01", None, "2025-08-01", None, None],
            "hours_to_limit": [9000.0, 800.0, 0.0, 900.0, np.nan, 0.0],
        },
        index=pd.Index([11, 12, 13, 14, 15, 16], name="pump_id"),
    )
    assert service_rank(frame).to_dict() == {16: 1, 13: 2, 14: 3, 12: 4, 15: 5, 11: 6}


def test_slope_not_significant_leaves_the_upper_bound_open():
    rng = np.random.default_rng(12)
    pumps = ts.make_pumps(3, rng)
    # Very slow wear and few readings: the slope is positive but not significant.
    readings = ts.wear_readings(
        pumps,
        rng,
        n_readings=5,
        eta_new=np.full(3, 0.95),
        growth_per_h=np.full(3, 2e-6),
        hours_per_day=np.full(3, 12.0),
        noise=0.01,
    )
    res = analyze_fleet(pumps, readings, None, None, now=readings["taken_at"].max()).results
    assert res["upper_bound_open"].any()
    for pid, row in res.iterrows():
        fit_b = row["eta_v_decline_per_1000h"]
        if np.isfinite(row["hours_to_limit"]):
            assert row["upper_bound_open"] and np.isnan(row["hours_to_limit_high"]), pid
            assert pd.isna(row["limit_date_high"])
        else:
            assert fit_b <= 0 and "flat or improving" in (row["eta_v_note"] or ""), pid
        assert row["status"] == "healthy" or "falling fast" not in " ".join(row["reasons"])


@pytest.mark.slow
def test_a_fleet_of_2000_pumps_is_analysed_in_one_pass():
    # How long it takes belongs to the benchmark (python3 -m benchmarks.run), not to a timed test here.
    fleet = ts.wearing_fleet(2000, seed=77, n_readings=520)
    analysis = analyze_fleet(
        fleet.pumps, fleet.readings, fleet.events, fleet.samples, now=fleet.readings["taken_at"].max()
    )
    assert len(analysis.results) == 2000
    assert analysis.results["status"].notna().all()


def test_service_order_keys_sort_as_the_stated_order():
    # The order as README states it, written as plain Python tuples (common practice, no source): status group,
    # furthest past first, due_soon by the lower-bound date (none last), hours to limit (none last), the name.
    rng = np.random.default_rng(7)
    n = 400
    statuses = np.array(["past_limit", "due_soon", "watch", "healthy"])
    margins = rng.choice([np.nan, -0.0, 0.0, 0.3, -1.5, 2.0, np.inf], n)
    hours = rng.choice([np.nan, 0.0, -0.0, 12.5, 900.0, 1e7, -3.0], n)
    dates = rng.choice([None, "2025-09-01", "2025-08-01", "2031-01-15"], n)
    frame = pd.DataFrame({"status": rng.choice(statuses, n), "past_margin": margins, "limit_date_low": dates,
                          "hours_to_limit": hours, "pump": [f"P-{rng.integers(0, 60):02d}-{i}" for i in range(n)]},
                         index=pd.Index(rng.permutation(n) + 100, name="pump_id"))

    def key(row):
        margin = -(row.past_margin if np.isfinite(row.past_margin) or np.isinf(row.past_margin) else -np.inf)
        date = row.limit_date_low if row.status == "due_soon" and pd.notna(row.limit_date_low) else None
        return (list(statuses).index(row.status), margin, date is None, date or "",
                row.hours_to_limit if not np.isnan(row.hours_to_limit) else np.inf, row.pump)

    expected = sorted(frame.itertuples(), key=key)
    ranks = service_rank(frame)
    assert [row.Index for row in expected] == list(ranks.sort_values().index)
    keys = service_order_keys(frame)
    assert sorted(keys) == [keys[frame.index.get_loc(row.Index)] for row in expected]
