"""Service intervals: from a pump's first reading or an overhaul/replacement to the next one.

Trends never cross an interval start, because an overhaul resets the clearances the trend measures.
"""

import numpy as np
import pandas as pd

from fleet.kinds import RESETS_INTERVAL
from fleet.trend.grouped import group_max, group_min, group_time_max, pair_codes

# Ordering key = day number * _DAY_SLOT + hour-meter value, so that on the day of an event the hour meter
# decides which side of it a reading falls. _DAY_SLOT exceeds any hour-meter value (114 years of running).
_DAY_SLOT = 1.0e6
_END_OF_DAY = _DAY_SLOT - 1.0

INTERVAL_COLUMNS = [
    "pump_id",
    "interval_no",
    "start_at",
    "start_kind",
    "start_hours",
    "end_at",
    "end_kind",
    "end_hours",
    "n_readings",
    "first_hours",
    "last_hours",
    "first_reading_at",
    "last_reading_at",
    "is_current",
]


def _day_number(times: np.ndarray) -> np.ndarray:
    days = np.asarray(times).astype("datetime64[D]")  # floors to the day, as normalising does
    return days.astype(np.int64).astype(float)


def _order_key(times: np.ndarray, hours: np.ndarray, missing_hours: float) -> np.ndarray:
    h = np.asarray(hours, dtype=float)
    h = np.where(np.isfinite(h), np.clip(h, 0.0, _END_OF_DAY), missing_hours)
    return _day_number(times) * _DAY_SLOT + h


def reset_events(events: pd.DataFrame | None) -> dict[str, np.ndarray]:
    """The events that start a new interval, numbered 1.. per pump in time order: pump_id, date, hours, kind, key
    (the ordering key) and interval_no, as arrays (one pump's few events cost less so than framed)."""
    if events is None or len(events) == 0:
        return {"pump_id": np.zeros(0, dtype=np.int64), "date": np.zeros(0, dtype="datetime64[ns]"),
                "hours": np.zeros(0), "kind": np.zeros(0, dtype=object), "key": np.zeros(0),
                "interval_no": np.zeros(0, dtype=np.int64)}
    kinds = events["kind"].to_numpy(object)
    chosen = np.fromiter((k in RESETS_INTERVAL for k in kinds), dtype=bool, count=len(kinds))
    pump = events["pump_id"].to_numpy(np.int64)[chosen]
    dates = events["date"]
    date = (dates if dates.dtype.kind == "M" else pd.to_datetime(dates)).to_numpy()[chosen]
    hours = events["hours"]
    hours = (hours.to_numpy(float) if hours.dtype.kind in "fiu"
             else pd.to_numeric(hours, errors="coerce").to_numpy(float))[chosen]
    # An event without hours applies to every reading of its day ("at or before it").
    key = _order_key(date, hours, missing_hours=-1.0)
    order = np.lexsort((key, pump))  # stable: by pump, then key
    pump = pump[order]
    first_of_pump = np.searchsorted(pump, pump, side="left")
    return {"pump_id": pump, "date": date[order], "hours": hours[order], "kind": kinds[chosen][order],
            "key": key[order], "interval_no": np.arange(len(pump), dtype=np.int64) - first_of_pump + 1}


def _resets_before(resets: dict[str, np.ndarray], pump_ids: np.ndarray, key: np.ndarray) -> np.ndarray:
    """Per reading, how many of its pump's reset events come at or before it: its interval number (resets are
    numbered 1.. in key order). Exact comparisons of the ordering keys, one pass per reset of the busiest pump."""
    reset_pump = resets["pump_id"]  # sorted by pump, then key (reset_events)
    reset_key = resets["key"]
    first = np.searchsorted(reset_pump, pump_ids, side="left")
    last = np.searchsorted(reset_pump, pump_ids, side="right")
    count = np.zeros(len(pump_ids), dtype=np.int64)
    for k in range(int((last - first).max(initial=0))):
        at = first + k
        count += (at < last) & (reset_key[np.minimum(at, len(reset_key) - 1)] <= key)
    return count


def assign_intervals(readings: pd.DataFrame, events: pd.DataFrame | None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Place every reading in its pump's service interval.

    Returns (readings, intervals). readings gains interval_no (0 = from the first reading, k = after the
    k-th reset event), interval_start_at, interval_start_hours, interval_hours (hours since the interval
    start) and age_hours (hours since the last reset; for interval 0 the hour meter itself, taken to count
    from new). intervals has one row per pump interval (INTERVAL_COLUMNS), including intervals opened by an
    event that have no readings yet; is_current marks each pump's latest one.
    """
    resets = reset_events(events)
    r = readings
    if not pd.api.types.is_datetime64_dtype(r["taken_at"].dtype):
        r = r.assign(taken_at=pd.to_datetime(r["taken_at"]))
    hours = pd.to_numeric(r["hours"], errors="coerce").to_numpy(dtype=float)
    taken = r["taken_at"].to_numpy()
    key = _order_key(taken, hours, missing_hours=_END_OF_DAY)
    reading_pump = r["pump_id"].to_numpy(np.int64)
    reading_no = _resets_before(resets, reading_pump, key)

    # Every pump interval: those with readings, those opened by a reset event, and, for a pump overhauled before
    # its first reading, the life from new to that overhaul (interval 0, on record too).
    reset_pump = resets["pump_id"]
    reset_no = resets["interval_no"]
    from_new = reset_pump[reset_no == 1]
    pairs, codes = pair_codes(np.concatenate([reading_pump, reset_pump, from_new]),
                              np.concatenate([reading_no, reset_no, np.zeros(len(from_new), dtype=np.int64)]))
    n = len(pairs)
    in_reading, in_reset = codes[:len(r)], codes[len(r):len(r) + len(reset_pump)]

    n_readings = np.bincount(in_reading, minlength=n).astype(np.int64)
    first_hours, last_hours = group_min(in_reading, hours, n), group_max(in_reading, hours, n)
    first_reading_at = group_time_max(in_reading, taken, n, smallest=True)
    last_reading_at = group_time_max(in_reading, taken, n)

    event_date = resets["date"]
    time_type = np.result_type(taken.dtype, event_date.dtype)
    start_at = np.full(n, np.datetime64("NaT"), dtype=time_type)
    start_at[in_reset] = event_date
    start_kind = np.full(n, np.nan, dtype=object)
    start_kind[in_reset] = resets["kind"]
    event_hours = np.full(n, np.nan)
    event_hours[in_reset] = resets["hours"]

    initial = pairs[:, 1] == 0
    unread = initial & (n_readings == 0)
    start_at = np.where(initial, first_reading_at.astype(time_type), start_at)
    start_kind[initial] = "first_reading"
    start_kind[unread] = "new"
    # The event's hour-meter value starts the clock unless the readings after it show a fresh meter.
    use_event = ~np.isnan(event_hours) & ~(event_hours > first_hours)
    start_hours = np.where(use_event, event_hours, first_hours)
    start_hours[unread] = 0.0  # the hour meter counts from new

    # Each interval ends where its pump's next one starts (pairs are sorted by pump, then interval).
    has_next = np.r_[pairs[1:, 0] == pairs[:-1, 0], False]
    after = np.minimum(np.arange(n) + 1, max(n - 1, 0))
    end_at = np.where(has_next, start_at[after], np.datetime64("NaT"))
    end_kind = np.where(has_next, start_kind[after], np.nan)
    end_hours = np.where(has_next, event_hours[after], np.nan)
    intervals = pd.DataFrame({
        "pump_id": pairs[:, 0], "interval_no": pairs[:, 1], "start_at": start_at,
        "start_kind": pd.Series(start_kind, dtype=object),
        "start_hours": start_hours, "end_at": end_at.astype(time_type), "end_kind": pd.Series(end_kind, dtype=object),
        "end_hours": end_hours,
        "n_readings": n_readings, "first_hours": first_hours, "last_hours": last_hours,
        "first_reading_at": first_reading_at, "last_reading_at": last_reading_at, "is_current": np.isnat(end_at),
    }, columns=INTERVAL_COLUMNS)

    interval_hours = hours - start_hours[in_reading]
    placed = pd.DataFrame({
        "interval_no": reading_no,
        "interval_start_at": start_at[in_reading],
        "interval_start_hours": start_hours[in_reading],
        "interval_hours": interval_hours,
        "age_hours": np.where(reading_no == 0, hours, interval_hours),
    }, index=r.index)
    # Framed once beside the readings: no copy of them, no insert per column.
    again = [c for c in placed if c in r]
    return pd.concat([r.drop(columns=again) if again else r, placed], axis=1), intervals


def interval_lives(intervals: pd.DataFrame) -> pd.DataFrame:
    """Running hours lived by each interval, for the fleet life statistics.

    failed: the interval ended at a reset event. life_hours: age at the end (the event's hours, else the
    last reading's) or, for the running interval, at its last reading. entry_hours: age when we started
    watching it (interval 0 enters at its first reading's meter value: left truncation; a reset interval at 0).
    """
    # On the columns' arrays, framed once (for one pump's few intervals pandas' steps were most of the cost).
    initial = intervals["interval_no"].to_numpy() == 0
    current = intervals["is_current"].to_numpy()
    last, end = intervals["last_hours"].to_numpy(), intervals["end_hours"].to_numpy()
    zero = np.where(initial, 0.0, intervals["start_hours"].to_numpy(dtype=float))
    end_meter = np.where(current, last, np.where(pd.isna(end), last, end))
    # Interval 0 is watched from its first reading (left truncation), or from new when the maintenance record
    # shows it ended before any reading.
    entry = np.where(initial & (intervals["n_readings"].to_numpy() > 0), intervals["first_hours"].to_numpy(), 0.0)
    life = end_meter.astype(float) - zero
    usable = np.isfinite(life) & np.isfinite(entry) & (life > 0)
    usable &= life >= entry
    return pd.DataFrame({"pump_id": intervals["pump_id"].to_numpy()[usable],
                         "interval_no": intervals["interval_no"].to_numpy()[usable], "entry_hours": entry[usable],
                         "life_hours": life[usable], "failed": ~intervals["is_current"].to_numpy(dtype=bool)[usable]})
