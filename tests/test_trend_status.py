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
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import assess_status, horizon_remaining_hours, service_order_keys, service_rank
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


# The status works on each column's array, read once (for the one pump of a write a pandas operation on a Series of
# one row costs more than its arithmetic). What it did on Series before is kept here as the reference: the arrays
# must give the same figures, order and words to the last bit, whatever types the columns come in.

STATUS_COLUMNS = ["status", "reasons", "rank"]


def _reference_order_keys(frame: pd.DataFrame) -> np.ndarray:
    """service_order_keys as it was written on Series (pandas' Categorical codes and datetime conversion)."""
    def col(name, default):
        return frame[name] if name in frame else pd.Series(default, index=frame.index)

    def num(name):
        return pd.to_numeric(col(name, np.nan), errors="coerce").to_numpy(dtype=float)

    def sortable(values):
        bits = (np.asarray(values, dtype=np.float64) + 0.0).view(np.uint64)
        negative = (bits >> np.uint64(63)).astype(bool)
        bits = np.where(negative, ~bits, bits | np.uint64(1 << 63))
        return bits.astype(">u8").view(np.uint8).reshape(-1, 8)

    status = col("status", "healthy").astype(str).to_numpy()
    group = pd.Categorical(status, categories=["past_limit", "due_soon", "watch", "healthy"], ordered=True).codes + 1
    margin = -np.nan_to_num(num("past_margin"), nan=-np.inf)
    date_low = pd.to_datetime(col("limit_date_low", pd.NaT)).where(status == "due_soon")
    no_date = date_low.isna().to_numpy()
    date_ns = np.where(no_date, 0, date_low.to_numpy(dtype="datetime64[ns]").view(np.int64))
    date_bits = (date_ns.astype(np.int64).view(np.uint64) ^ np.uint64(1 << 63)).astype(">u8").view(np.uint8)
    hours = np.nan_to_num(num("hours_to_limit"), nan=np.inf)
    fixed = np.concatenate([group.astype(np.uint8).reshape(-1, 1), sortable(margin), no_date.astype(np.uint8)
                            .reshape(-1, 1), date_bits.reshape(-1, 8), sortable(hours)], axis=1)
    names = col("pump", "").astype(str).to_numpy()
    return np.array([row.tobytes() + name.encode() for row, name in zip(fixed, names, strict=True)], dtype=object)


def _reference_horizon(frame: pd.DataFrame, now) -> tuple[np.ndarray, np.ndarray]:
    """horizon_remaining_hours as it was written on Series (pandas' to_datetime and total_seconds)."""
    per_day = pd.to_numeric(frame["hours_per_day"], errors="coerce").to_numpy(dtype=float)
    per_day = np.where(np.isfinite(per_day) & (per_day > 0), per_day, 24.0)
    last_at = pd.to_datetime(frame["last_reading_at"])
    since_days = ((pd.Timestamp(now) - last_at).dt.total_seconds() / 86400.0).to_numpy(dtype=float)
    since_days = np.where(np.isfinite(since_days), np.maximum(since_days, 0.0), 0.0)
    left = pd.to_numeric(frame["hours_to_limit"], errors="coerce").to_numpy(dtype=float) - per_day * since_days
    weeks = pd.to_numeric(frame["planning_horizon_weeks"], errors="coerce").to_numpy(dtype=float)
    return left, weeks * 7.0 * per_day


def _as_plain_objects(res: pd.DataFrame) -> pd.DataFrame:
    """The same results with every column in the types pandas' slower paths take: numbers as objects (None for a
    missing one), flags as nullable booleans, times as ISO text or Timestamps, text as objects."""
    out = {}
    for name, column in res.items():
        if column.dtype == bool:
            out[name] = column.astype("boolean")
        elif column.dtype.kind == "f":
            out[name] = pd.Series([None if v != v else v for v in column.tolist()], index=res.index, dtype=object)
        elif column.dtype.kind == "M":
            as_text = name in ("last_reading_at", "limit_date_low")
            out[name] = pd.Series([None if pd.isna(v) else (v.isoformat() if as_text else v) for v in column],
                                  index=res.index, dtype=object)
        else:
            out[name] = column.astype(object)
    return pd.DataFrame(out, index=res.index)


def test_status_of_columns_in_any_types_is_the_same(fleet):
    """Reference: the same pumps with their columns in pandas' general types (objects, nullable flags, ISO text)."""
    analysis, now = fleet
    res = analysis.results.drop(columns=STATUS_COLUMNS)
    native = assess_status(res, now, AnalysisSettings())
    plain = assess_status(_as_plain_objects(res), now, AnalysisSettings())
    pd.testing.assert_frame_equal(plain, native, check_exact=True)
    assert set(native["status"]) == {"past_limit", "due_soon", "watch", "healthy"}
    pd.testing.assert_frame_equal(native, analysis.results[STATUS_COLUMNS], check_exact=True)


def test_order_keys_equal_the_series_reference(fleet):
    """Reference: the Series code above, on the results, on them in general types and on their JSON records (dates
    as text), and on a frame lacking every column it reads."""
    analysis, now = fleet
    res = analysis.results
    for frame in (res, _as_plain_objects(res), pd.DataFrame(results_to_records(res)),
                  pd.DataFrame({"other": [1, 2]})):
        keys = service_order_keys(frame)
        assert keys.tolist() == _reference_order_keys(frame).tolist()
        reference_rank = np.empty(len(keys), dtype=np.int64)
        reference_rank[np.argsort(_reference_order_keys(frame), kind="stable")] = np.arange(1, len(keys) + 1)
        assert service_rank(frame).tolist() == reference_rank.tolist()
    assert assess_status(res.drop(columns=STATUS_COLUMNS), now, AnalysisSettings())["rank"].tolist() == \
        service_rank(res).tolist()


def test_a_stores_keys_from_its_records_equal_the_frames(fleet):
    """fleet.services.analysis.store.order_keys reads the records' fields as arrays (dates as numpy days) rather
    than a frame of them: the same keys as the frame gives, here on the synthetic fleet's records (every status,
    dates and missing ones), one record at a time as a write stores them, and on records whose dates numpy does
    not read as ISO days (pandas then reads them)."""
    from fleet.services.analysis.store import ORDER_FIELDS, order_keys

    analysis, _ = fleet
    records = results_to_records(analysis.results)
    assert {r["status"] for r in records} == {"past_limit", "due_soon", "watch", "healthy"}

    def framed(rows):
        return service_order_keys(pd.DataFrame({n: [r.get(n) for r in rows] for n in ORDER_FIELDS})).tolist()

    assert order_keys(records).tolist() == framed(records)
    for record in records[:40]:
        assert order_keys([record]).tolist() == framed([record])
    due = next(r for r in records if r["status"] == "due_soon")
    for odd in ("2026-1-5", "2026-01-05T10:00", "05/01/2026", None):
        rows = [{**due, "limit_date_low": odd}, {**due, "pump": "X-2", "limit_date_low": None}]
        assert order_keys(rows).tolist() == framed(rows), odd


@pytest.mark.parametrize("unit", ["s", "ms", "us", "ns"])
def test_horizon_hours_equal_the_series_reference(unit):
    """Reference: pandas' own (now - times).dt.total_seconds() on a Series, times in each unit, NaT among them,
    a time after now, fractions of a second."""
    rng = np.random.default_rng(7)
    now = pd.Timestamp("2026-03-01 10:15:00.123456")
    offsets = rng.integers(-5 * 10**15, 10**17, 300).astype("timedelta64[ns]")
    times = (np.datetime64(now.to_datetime64(), "ns") - offsets).astype(f"datetime64[{unit}]")
    times[::17] = np.datetime64("NaT")
    frame = pd.DataFrame({
        "hours_per_day": np.where(rng.random(300) < 0.1, np.nan, rng.uniform(0, 24, 300)),
        "last_reading_at": times,
        "hours_to_limit": rng.uniform(-100, 20000, 300),
        "planning_horizon_weeks": rng.choice([np.nan, 4.0, 26.0], 300),
    })
    for at in (now, now.as_unit("ns"), now.to_pydatetime()):
        left, horizon = horizon_remaining_hours(frame, at)
        want_left, want_horizon = _reference_horizon(frame, at)
        assert left.tobytes() == want_left.tobytes() and horizon.tobytes() == want_horizon.tobytes()
    as_text = frame.assign(last_reading_at=frame["last_reading_at"].astype(str).where(frame["last_reading_at"].notna()))
    left, _ = horizon_remaining_hours(as_text, now)
    assert left.tobytes() == _reference_horizon(as_text, now)[0].tobytes()


def test_status_and_priors_of_a_mapping_of_columns_are_those_of_the_frame(fleet):
    """Reference: the same results as a frame. The engine may give its columns before it frames them, as a dict
    of Series or of arrays; apply_priors sets its columns into the dict as into the frame."""
    from fleet.trend.engine import apply_priors

    analysis, now = fleet
    res = analysis.results.drop(columns=STATUS_COLUMNS)
    want = assess_status(res, now, AnalysisSettings())
    for columns in ({name: column for name, column in res.items()},
                    {name: column.to_numpy() for name, column in res.items()}):
        got = assess_status(columns, now, AnalysisSettings())
        pd.testing.assert_frame_equal(got.set_axis(res.index), want, check_exact=True)
        framed = res.copy()
        want_priors = apply_priors(framed, analysis.priors, now)
        got_priors = apply_priors(columns, analysis.priors, now)
        pd.testing.assert_frame_equal(got_priors, want_priors, check_exact=True)
        for name in ("planning_horizon_hours", "prior_hours_to_overhaul", "prior_b10_hours"):
            assert np.asarray(columns[name]).tobytes() == framed[name].to_numpy().tobytes()
