"""Service intervals: trends restart at an overhaul or replacement, never at other work."""

import numpy as np
import pandas as pd

from fleet.trend.intervals import assign_intervals, interval_lives


def _readings(pump_id, days, hours):
    return pd.DataFrame(
        {
            "reading_id": np.arange(len(days)) + 100 * pump_id,
            "pump_id": pump_id,
            "taken_at": pd.Timestamp("2025-01-01 08:00") + pd.to_timedelta(days, unit="D"),
            "hours": np.asarray(hours, dtype=float),
        }
    )


def _events(rows):
    return pd.DataFrame(rows, columns=["pump_id", "date", "hours", "kind", "cost"]).astype(
        {"date": "datetime64[ns]", "hours": float}
    )


def test_overhaul_starts_a_new_interval_and_other_work_does_not():
    r = _readings(1, [0, 10, 20, 30, 40], [1000, 1100, 1200, 1300, 1400])
    ev = _events(
        [
            (1, "2025-01-16", 1150.0, "filter_change", np.nan),
            (1, "2025-01-26", 1250.0, "overhaul", 3000.0),
        ]
    )
    placed, intervals = assign_intervals(r, ev)
    assert list(placed["interval_no"]) == [0, 0, 0, 1, 1]
    assert list(placed["interval_hours"]) == [0.0, 100.0, 200.0, 50.0, 150.0]
    assert list(placed["age_hours"]) == [1000.0, 1100.0, 1200.0, 50.0, 150.0]
    assert list(intervals["start_kind"]) == ["first_reading", "overhaul"]
    assert list(intervals["is_current"]) == [False, True]


def test_same_day_event_hours_decide_the_side():
    # Two readings on the overhaul day: the one before the event's hour-meter value stays in the old interval.
    r = _readings(1, [0, 10, 10, 20], [1000, 1100, 1120, 1200])
    ev = _events([(1, "2025-01-11", 1110.0, "replacement", np.nan)])
    placed, _ = assign_intervals(r, ev)
    assert list(placed["interval_no"]) == [0, 0, 1, 1]
    # Without event hours the event counts from the start of its day ("at or before it").
    placed, _ = assign_intervals(r, _events([(1, "2025-01-11", np.nan, "replacement", np.nan)]))
    assert list(placed["interval_no"]) == [0, 1, 1, 1]
    assert list(placed["interval_hours"]) == [0.0, 0.0, 20.0, 100.0]


def test_event_after_last_reading_opens_an_empty_current_interval():
    r = _readings(1, [0, 10], [10, 50])
    _, intervals = assign_intervals(r, _events([(1, "2025-02-01", 60.0, "overhaul", np.nan)]))
    current = intervals[intervals["is_current"]].iloc[0]
    assert current["interval_no"] == 1 and current["n_readings"] == 0


def test_replacement_with_a_fresh_hour_meter():
    # The new pump's meter starts near zero, below the event's old-meter value: the clock starts at its readings.
    r = _readings(1, [0, 10, 20, 30], [5000, 5100, 3, 80])
    placed, _ = assign_intervals(r, _events([(1, "2025-01-15", 5150.0, "replacement", np.nan)]))
    assert list(placed["interval_hours"]) == [0.0, 100.0, 0.0, 77.0]


def test_interval_lives_for_the_fleet_prior():
    r = pd.concat([_readings(1, [0, 10, 20, 30], [1000, 1100, 1200, 1300]), _readings(2, [0, 5], [0, 40])])
    ev = _events([(1, "2025-01-16", 1150.0, "overhaul", np.nan)])
    _, intervals = assign_intervals(r, ev)
    lives = interval_lives(intervals).set_index(["pump_id", "interval_no"])
    # Interval 0 of pump 1: hour meter from new, watched from 1000 h (left truncation), overhauled at 1150 h.
    assert lives.loc[(1, 0), ["entry_hours", "life_hours", "failed"]].tolist() == [1000.0, 1150.0, True]
    assert lives.loc[(1, 1), ["entry_hours", "life_hours", "failed"]].tolist() == [0.0, 150.0, False]
    assert lives.loc[(2, 0), ["entry_hours", "life_hours", "failed"]].tolist() == [0.0, 40.0, False]


def test_no_events_at_all():
    placed, intervals = assign_intervals(_readings(3, [0, 1], [1, 2]), None)
    assert list(placed["interval_no"]) == [0, 0] and len(intervals) == 1


def test_overhauls_from_before_the_first_reading_give_lives_from_new():
    # A site's maintenance log: overhauled at 9000 h and 17000 h, readings only begin at 20000 h.
    r = _readings(4, [0, 10, 20], [20000, 20100, 20200])
    ev = _events([(4, "2023-01-10", 9000.0, "overhaul", np.nan), (4, "2024-02-01", 17000.0, "overhaul", np.nan)])
    placed, intervals = assign_intervals(r, ev)
    assert set(placed["interval_no"]) == {2}  # every reading after the second overhaul
    lives = interval_lives(intervals).set_index(["pump_id", "interval_no"])
    # New to first overhaul: seen whole (entry 0), 9000 h; then 8000 h; the running one 3200 h so far.
    assert lives.loc[(4, 0), ["entry_hours", "life_hours", "failed"]].tolist() == [0.0, 9000.0, True]
    assert lives.loc[(4, 1), ["entry_hours", "life_hours", "failed"]].tolist() == [0.0, 8000.0, True]
    assert lives.loc[(4, 2), ["entry_hours", "life_hours", "failed"]].tolist() == [0.0, 3200.0, False]
    assert intervals.loc[intervals["interval_no"] == 0, "start_kind"].tolist() == ["new"]


def _interval_lives_pandas(intervals: pd.DataFrame) -> pd.DataFrame:
    """The reference: interval_lives as it was before it worked on the columns' arrays (pandas steps on a copy)."""
    iv = intervals.copy()
    initial = iv["interval_no"].to_numpy() == 0
    zero = np.where(initial, 0.0, iv["start_hours"].to_numpy(dtype=float))
    end_meter = np.where(iv["is_current"], iv["last_hours"], iv["end_hours"].fillna(iv["last_hours"]))
    out = pd.DataFrame({
        "pump_id": iv["pump_id"], "interval_no": iv["interval_no"],
        "entry_hours": np.where(initial & (iv["n_readings"].to_numpy() > 0), iv["first_hours"], 0.0),
        "life_hours": end_meter.astype(float) - zero, "failed": ~iv["is_current"].to_numpy(dtype=bool)})
    usable = np.isfinite(out["life_hours"]) & np.isfinite(out["entry_hours"]) & (out["life_hours"] > 0)
    usable &= out["life_hours"] >= out["entry_hours"]
    return out[usable].reset_index(drop=True)


def test_interval_lives_on_arrays_equal_the_pandas_steps_they_replaced():
    # Reference: _interval_lives_pandas above, to the last bit, dtypes included, on random pumps with resets before,
    # between and after their readings, missing hour-meter values, other work, and a pump without readings.
    from pandas.testing import assert_frame_equal

    rng = np.random.default_rng(7)
    for trial in range(20):
        readings, events = [], []
        for pump in range(1, 9):
            n = int(rng.integers(0, 25)) if pump > 1 else 0
            days = np.sort(rng.choice(400, size=n, replace=False))
            hours = 500.0 * pump + 20.0 * days + rng.normal(0, 3, n)
            hours[rng.random(n) < 0.1] = np.nan
            readings.append(_readings(pump, days, hours))
            for _ in range(int(rng.integers(0, 4))):
                day = int(rng.integers(-30, 430))
                kind = str(rng.choice(["overhaul", "replacement", "filter_change", "seal_repair"]))
                at = float(500.0 * pump + 20.0 * day) if rng.random() < 0.8 else np.nan
                events.append((pump, pd.Timestamp("2025-01-01") + pd.Timedelta(days=day), at, kind, np.nan))
        _, intervals = assign_intervals(pd.concat(readings, ignore_index=True), _events(events))
        for part in (intervals, intervals.iloc[:0], intervals.iloc[::2]):
            assert_frame_equal(interval_lives(part), _interval_lives_pandas(part), check_exact=True, obj=str(trial))
