"""Status of every pump in plain words, each backed by full-sentence reasons, and the service-list order.

past_limit: a limit is crossed now. due_soon: a limit is expected inside the planning horizon (own trend).
watch: something needs a look (fast decline, case drain jump, oil, overdue reading or lab result, too
little data). healthy: none of these, said with the figures that show it.
"""

from collections.abc import Mapping

import numpy as np
import pandas as pd

from fleet.horizon import BEYOND_WORDS, is_beyond
from fleet.trend.oil_condition import column_floats, lab_days_waiting, lab_late_sentence
from fleet.trend.referral import NO_LEAKAGE_MEASURED
from fleet.trend.settings import AnalysisSettings

STATUS_ORDER = ("past_limit", "due_soon", "watch", "healthy")
LIMIT_WORDS = {"eta_v": "volumetric efficiency", "case_drain": "case drain"}
FALLBACK_HOURS_PER_DAY = 24.0  # with no hour-meter history, assume continuous running (the earliest date)


def _rows(frame: Mapping) -> int:
    """How many pumps: a frame's rows, or the length of a mapping's columns."""
    if isinstance(frame, pd.DataFrame):
        return len(frame)
    return len(next(iter(frame.values()))) if len(frame) else 0


def _col(frame: Mapping, name: str, default=np.nan) -> np.ndarray:
    """A column's values as an array (``default`` in every row when the frame has no such column).

    Taken once per column and worked on as arrays: for the one pump of a write, a pandas operation on a Series of
    one row costs far more than its arithmetic, and for a fleet the arrays are what pandas would work on anyway.
    ``frame``: a DataFrame, or a mapping of column names to Series or arrays (the engine's columns before it frames
    them)."""
    if name in frame:
        return np.asarray(frame[name])
    dtype = float if isinstance(default, float) else bool if isinstance(default, bool) else object
    return np.full(_rows(frame), default, dtype=dtype)


def _num(frame: Mapping, name: str) -> np.ndarray:
    return column_floats(frame[name]) if name in frame else np.full(_rows(frame), np.nan)


def _flag(frame: Mapping, name: str, missing: bool = False) -> np.ndarray:
    """A column as bools, a missing value (and a missing column) read as ``missing``."""
    if name not in frame:
        return np.full(_rows(frame), missing, dtype=bool)
    column = frame[name]
    if column.dtype == np.bool_:  # plain numpy bools have no missing value to fill
        return np.asarray(column, dtype=bool)
    return pd.Series(column).astype("boolean").fillna(missing).to_numpy(dtype=bool)


def _date(value) -> str:
    return "no date" if pd.isna(value) else pd.Timestamp(value).strftime("%Y-%m-%d")


def _value(column: np.ndarray, row: int):
    """One row's value, a time as pandas' Timestamp (NaT when missing), as iterating a Series gives it."""
    value = column[row]
    return pd.Timestamp(value) if isinstance(value, np.datetime64) else value


def _sentences(mask: np.ndarray, make, *columns) -> list:
    """make(*values) for the masked pumps, None elsewhere (one string per pump, no loop per reading). A column may
    be given as a function that reads it, read only when some pump is masked."""
    out = [None] * len(mask)
    rows = np.flatnonzero(mask).tolist()
    if rows:
        columns = [column() if callable(column) else column for column in columns]
        for row in rows:
            out[row] = make(*(_value(column, row) for column in columns))
    return out


def wear_shape_sentence(law: str, weights: dict | None, power: float) -> str:
    """The shape the wear takes, in words, and how much of the weight among the laws compared that shape has."""
    share = (weights or {}).get(law, np.nan)
    how_sure = f" (weight {share:.0%} among the wear laws compared)" if np.isfinite(share) else ""
    if law == "exponential":
        shape = "The wear is growing exponentially, faster as the clearances open"
    elif law == "linear":
        shape = "The wear is steady, in proportion to the running hours"
    elif law == "run_in":
        shape = ("The wear was fast at first, as parts bed in after an overhaul or when new, and is settling "
                 "into steady wear")
    elif np.isfinite(power) and power > 1:
        shape = f"The wear is accelerating, like a power {power:.1f} of the running hours"
    elif np.isfinite(power):
        shape = f"The wear is slowing down, as after run-in, like a power {power:.1f} of the running hours"
    else:
        shape = "The wear follows a power of the running hours"
    return shape + how_sure + "."


def days_since(last_at: np.ndarray, now) -> np.ndarray:
    """Days from each time to ``now`` (NaN for a missing time), as (now - times).dt.total_seconds() / 86400 gives
    them: the difference taken by numpy in the finer unit of the two (as pandas takes it), its seconds by pandas'
    own TimedeltaArray, with no Series around it."""
    stamp = pd.Timestamp(now)
    if last_at.dtype.kind == "M" and stamp.tz is None:
        seconds = pd.array(stamp.to_datetime64() - last_at).total_seconds()
        return np.asarray(seconds, dtype=float) / 86400.0
    times = pd.to_datetime(pd.Series(last_at, dtype=last_at.dtype))
    return ((stamp - times).dt.total_seconds() / 86400.0).to_numpy(dtype=float)


def horizon_remaining_hours(results: Mapping, now) -> tuple[np.ndarray, np.ndarray]:
    """(hours left from now to the governing limit, hours in the planning horizon) per pump."""
    return _horizon_hours(_num(results, "hours_per_day"), _col(results, "last_reading_at", pd.NaT),
                          _num(results, "hours_to_limit"), _num(results, "planning_horizon_weeks"), now)


def _horizon_hours(per_day, last_at, hours_to_limit, horizon_weeks, now) -> tuple[np.ndarray, np.ndarray]:
    """horizon_remaining_hours on the columns' arrays."""
    per_day = np.where(np.isfinite(per_day) & (per_day > 0), per_day, FALLBACK_HOURS_PER_DAY)
    since_days = days_since(last_at, now)
    since_days = np.where(np.isfinite(since_days), np.maximum(since_days, 0.0), 0.0)
    left = hours_to_limit - per_day * since_days
    horizon = horizon_weeks * 7.0 * per_day
    return left, horizon


def assess_status(results: Mapping, now, settings: AnalysisSettings) -> pd.DataFrame:
    """status, reasons (list of sentences) and rank (1..N, the service-list order) for every pump; ``results``: a
    frame (its index kept), or a mapping of column names to Series or arrays (an index 0..N-1)."""
    r = results
    eta, eta_lim = _num(r, "eta_v_ref"), _num(r, "eta_v_limit")
    drain, drain_lim = _num(r, "drain_pct_ref"), _num(r, "drain_limit_pct")
    last_eta, last_drain = _num(r, "last_eta_v_ref"), _num(r, "last_drain_pct_ref")
    trend_slip, trend_drain = _flag(r, "slip_enough_data"), _flag(r, "drain_enough_data")

    # past_limit: the fitted value now, or with no trend the last usable reading, beyond a limit.
    slip_past = _flag(r, "slip_past")
    drain_past = _flag(r, "drain_past")
    raw_slip_past = ~trend_slip & (last_eta <= eta_lim)
    raw_drain_past = ~trend_drain & (last_drain >= drain_lim)
    past = slip_past | drain_past | raw_slip_past | raw_drain_past
    reasons_past = [
        _sentences(
            slip_past,
            lambda e, lim: (
                f"Volumetric efficiency at reference is {100 * e:.1f} % by its trend, at or below its limit "
                f"{100 * lim:.1f} %."
            ),
            eta,
            eta_lim,
        ),
        _sentences(
            drain_past,
            lambda d, lim: (
                f"Case drain at reference is {d:.1f} % of max flow by its trend, at or above its limit {lim:.1f} %."
            ),
            drain,
            drain_lim,
        ),
        _sentences(
            raw_slip_past,
            lambda e, lim: (
                f"The last usable reading gives a volumetric efficiency at reference "
                f"of {100 * e:.1f} %, at or below the limit {100 * lim:.1f} % (too few readings for a trend)."
            ),
            last_eta,
            eta_lim,
        ),
        _sentences(
            raw_drain_past,
            lambda d, lim: (
                f"The last usable reading gives a case drain at reference of "
                f"{d:.1f} % of max flow, at or above the limit {lim:.1f} % (too few readings for a trend)."
            ),
            last_drain,
            drain_lim,
        ),
    ]

    # due_soon: the governing limit expected inside the planning horizon, by the pump's own trend.
    hours_to_limit, weeks = _num(r, "hours_to_limit"), _num(r, "planning_horizon_weeks")
    left, horizon = _horizon_hours(_num(r, "hours_per_day"), _col(r, "last_reading_at", pd.NaT), hours_to_limit,
                                   weeks, now)
    due = ~past & np.isfinite(left) & (left <= horizon)
    governing = _col(r, "governing_limit", None)
    reasons_due = [
        _sentences(
            due,
            lambda g, h, d, dl, dh, open_, w: (
                f"The {LIMIT_WORDS.get(g, g)} limit is expected in about {h:,.0f} running hours "
                + (f"after the last reading, around {_date(d)}: already past today if the pump kept running, and "
                   "no reading since confirms it"
                   if pd.notna(d) and pd.Timestamp(d) < pd.Timestamp(now).normalize()
                   else f"around {_date(d)}")
                + f" ({settings.confidence:.0%} bounds {_date(dl)} to "
                f"{'open (the trend is not yet certain)' if open_ else _date(dh)}), inside the {w:.0f}-week plan."
            ),
            governing,
            hours_to_limit,
            lambda: _col(r, "limit_date", pd.NaT),
            lambda: _col(r, "limit_date_low", pd.NaT),
            lambda: _col(r, "limit_date_high", pd.NaT),
            _flag(r, "upper_bound_open"),
            weeks,
        )
    ]

    # watch rules.
    decline = _num(r, "eta_v_decline_per_1000h")
    fast = trend_slip & _flag(r, "slip_b_significant") & (decline > settings.fast_decline_per_1000h)
    jump_ratio = _num(r, "drain_jump_ratio")
    jump = jump_ratio >= settings.drain_jump_ratio
    hot, cold = _flag(r, "oil_hot"), _flag(r, "oil_cold")
    oil_temp = _num(r, "oil_temp_c")
    steps = _num(r, "cleanliness_steps_over")
    dirty = steps > 0
    water = _flag(r, "water_high")
    lab_late = _flag(r, "lab_late")
    since, every = _num(r, "days_since_reading"), _num(r, "reading_interval_days")
    # A pump removed to stores has no rounds to miss.
    installed = _flag(r, "installed", missing=True)
    overdue = (since > every) & installed
    window = np.asarray(_col(r, "viscosity_window", None), dtype=object)
    visc_bad = np.isin(window, ["too_thin", "too_thick"])
    last_flag = np.asarray(_col(r, "last_flag", None), dtype=object)
    flagged = np.array([isinstance(f, str) and f != NO_LEAKAGE_MEASURED for f in last_flag], dtype=bool)
    notes = np.asarray(_col(r, "data_note", None), dtype=object)
    few = np.array([isinstance(n, str) for n in notes], dtype=bool)
    reasons_watch = [
        _sentences(
            fast,
            lambda d: (
                f"Volumetric efficiency is falling fast: {100 * d:.1f} points per 1000 h "
                f"(watch above {100 * settings.fast_decline_per_1000h:.1f})."
            ),
            decline,
        ),
        _sentences(
            jump,
            lambda x: (
                f"Case drain jumped to {x:.1f} times the median of this interval's earlier "
                "readings: check the pump now."
            ),
            jump_ratio,
        ),
        _sentences(
            hot,
            lambda t, m: f"Oil at {t:.0f} degC on the last reading, above the {m:.0f} degC limit.",
            oil_temp,
            lambda: _num(r, "oil_temp_max_c"),
        ),
        _sentences(
            cold,
            lambda t, m: f"Oil at {t:.0f} degC on the last reading, below the {m:.0f} degC minimum.",
            oil_temp,
            lambda: _num(r, "oil_temp_min_c"),
        ),
        _sentences(
            dirty,
            lambda c, n, t: (
                f"The latest oil sample, {c}, is {n:.0f} step{'s' if n != 1 else ''} dirtier than the {t} target."
            ),
            lambda: _col(r, "cleanliness_code", None),
            steps,
            lambda: _col(r, "cleanliness_target", None),
        ),
        _sentences(
            water,
            lambda w: f"Water in the oil is {w:.0f} ppm, above {settings.water_limit_ppm:.0f} ppm.",
            lambda: _num(r, "water_ppm"),
        ),
        _sentences(
            lab_late,
            lambda d: lab_late_sentence(d, lab_days_waiting(d, now), settings.lab_late_days),
            lambda: _col(r, "lab_pending_since", pd.NaT),
        ),
        _sentences(
            overdue,
            lambda s, n: f"Last reading {s:.0f} days ago; readings are due every {n:.0f} days.",
            since,
            every,
        ),
        _sentences(
            visc_bad,
            lambda nu, t: (
                f"Oil viscosity at its typical {t:.0f} degC is {nu:.0f} mm2/s, outside the pump's working window."
            ),
            lambda: _num(r, "viscosity_typical_cst"),
            lambda: _num(r, "oil_temp_typical_c"),
        ),
        _sentences(flagged, lambda f: f"The last reading could not be referred: {f}.", last_flag),
        _sentences(few, lambda n: n, notes),
    ]
    watch = ~past & ~due & (fast | jump | hot | cold | dirty | water | lab_late | overdue | visc_bad | flagged | few)

    status = np.select([past, due, watch], ["past_limit", "due_soon", "watch"], default="healthy")
    healthy = status == "healthy"
    reasons_healthy = [
        _sentences(
            healthy,
            lambda e, g, h, d, w: (
                (f"Volumetric efficiency at reference {100 * e:.1f} %; n" if np.isfinite(e) else "N")
                + (
                    f"o limit expected within {w:.0f} weeks (the {LIMIT_WORDS.get(g, g)} limit "
                    + (f"{BEYOND_WORDS} ahead)." if is_beyond(d, h, now) else f"in about {h:,.0f} running hours).")
                    if isinstance(g, str)
                    else f"o limit expected within {w:.0f} weeks: the trend shows no decline."
                )
            ),
            eta,
            governing,
            hours_to_limit,
            lambda: _col(r, "limit_date", pd.NaT),
            weeks,
        )
    ]
    crossed_limit = _col(r, "crossed_limit", None)
    crossed = past & np.array([isinstance(v, str) for v in crossed_limit], dtype=bool)
    reasons_crossed = [
        _sentences(
            crossed,
            lambda g, h, d, dl, dh: (
                f"By its trend the {LIMIT_WORDS.get(g, g)} limit was crossed at about {h:,.0f} h on the hour "
                f"meter, around {_date(d)} ({settings.confidence:.0%} bounds {_date(dl)} to "
                f"{'open' if pd.isna(dh) else _date(dh)})."
            ),
            crossed_limit,
            lambda: _num(r, "crossed_at_hours"),
            lambda: _col(r, "crossed_date", pd.NaT),
            lambda: _col(r, "crossed_date_low", pd.NaT),
            lambda: _col(r, "crossed_date_high", pd.NaT),
        )
    ]
    law = np.asarray(_col(r, "wear_law", None), dtype=object)
    shaped = (past | due) & np.array([isinstance(v, str) for v in law], dtype=bool)
    reasons_shape = [
        _sentences(
            shaped,
            lambda name, weights, p: wear_shape_sentence(name, weights, p),
            law,
            lambda: _col(r, "wear_law_weights", None),
            lambda: _num(r, "wear_power"),
        )
    ]
    all_reasons = reasons_past + reasons_crossed + reasons_due + reasons_shape + reasons_watch + reasons_healthy
    reasons = [[s for s in row if s is not None] for row in zip(*all_reasons, strict=True)] if _rows(r) else []

    keys = _order_keys(status, _num(r, "past_margin"), _col(r, "limit_date_low", pd.NaT), hours_to_limit,
                       _col(r, "pump", ""))
    return pd.DataFrame({"status": status, "reasons": reasons, "rank": _ranks(keys)},
                        index=r.index if isinstance(r, pd.DataFrame) else None)


def _sortable_float(values: np.ndarray) -> np.ndarray:
    """Big-endian bytes (n, 8) of float64 values whose byte order is their numeric order (-inf < ... < inf)."""
    bits = (np.asarray(values, dtype=np.float64) + 0.0).view(np.uint64)  # + 0.0 makes -0.0 equal to 0.0
    negative = (bits >> np.uint64(63)).astype(bool)
    bits = np.where(negative, ~bits, bits | np.uint64(1 << 63))
    return bits.astype(">u8").view(np.uint8).reshape(-1, 8)


def service_order_keys(frame: pd.DataFrame) -> np.ndarray:
    """Each pump's place in the service list as bytes: sorting the keys bytewise gives the service order.

    Past_limit first, furthest past first (past_margin, the log of value over limit); then due_soon by the
    lower-bound date (how soon and how sure); then watch, then healthy, each by hours to limit; the pump's name
    breaks ties. Bytes, so the database orders stored keys the same way (SQLite BLOB and PostgreSQL bytea
    compare bytewise), and a pump can be placed among the stored list without reading it. Works on stored
    records too (dates as text)."""
    return _order_keys(_col(frame, "status", "healthy"), _num(frame, "past_margin"),
                       _col(frame, "limit_date_low", pd.NaT), _num(frame, "hours_to_limit"), _col(frame, "pump", ""))


def _texts(values: np.ndarray) -> np.ndarray:
    """Values as text, as pandas' astype(str) gives them (a missing value stays missing); text as it is."""
    if all(type(v) is str for v in values.tolist()):
        return values
    return pd.Series(values, dtype=object).astype(str).to_numpy()


def _order_keys(status, past_margin, limit_date_low, hours_to_limit, pump) -> np.ndarray:
    """service_order_keys on the columns' arrays (assess_status keys its pumps so, no frame made)."""
    status = _texts(np.asarray(status))
    group = np.zeros(len(status), dtype=np.uint8)  # unknown first
    for code, name in enumerate(STATUS_ORDER, start=1):
        group[status == name] = code
    margin = -np.nan_to_num(past_margin, nan=-np.inf)
    due = status == "due_soon"
    if limit_date_low.dtype.kind == "M":
        date_low = np.where(due, limit_date_low, np.datetime64("NaT")).astype("datetime64[ns]")
        no_date = np.isnat(date_low)
        date_ns = np.where(no_date, 0, date_low.view(np.int64))
    else:  # text or objects (stored records): read as pandas reads them
        days = _iso_days(limit_date_low)
        if days is not None:
            date_low = np.where(due, days, np.datetime64("NaT")).astype("datetime64[ns]")
            no_date = np.isnat(date_low)
            date_ns = np.where(no_date, 0, date_low.view(np.int64))
        else:
            date_low = pd.to_datetime(pd.Series(limit_date_low, dtype=object)).where(due)
            no_date = date_low.isna().to_numpy()
            date_ns = np.where(no_date, 0, date_low.to_numpy(dtype="datetime64[ns]").view(np.int64))
    date_bits = (date_ns.astype(np.int64).view(np.uint64) ^ np.uint64(1 << 63)).astype(">u8").view(np.uint8)
    hours = np.nan_to_num(hours_to_limit, nan=np.inf)
    fixed = np.concatenate([
        group.reshape(-1, 1), _sortable_float(margin),
        no_date.astype(np.uint8).reshape(-1, 1), date_bits.reshape(-1, 8), _sortable_float(hours),
    ], axis=1)  # a missing date sorts after every date
    names = _texts(np.asarray(pump))
    return np.array([row.tobytes() + name.encode() for row, name in zip(fixed, names, strict=True)], dtype=object)


_ISO_DAY = len("2026-12-04")


def _iso_days(values) -> np.ndarray | None:
    """Dates a record holds as 'YYYY-MM-DD' text (missing: None or NaN) as numpy days, which read such text as
    pd.to_datetime does, without its parser's fixed cost; None for anything else (then pandas reads it)."""
    values = np.asarray(values, dtype=object).tolist()
    text = [v for v in values if isinstance(v, str)]
    if any(len(v) != _ISO_DAY for v in text) or any(v is not None and not isinstance(v, str | float) for v in values):
        return None
    if any(isinstance(v, float) and not np.isnan(v) for v in values):
        return None
    try:
        return np.array([v if isinstance(v, str) else "NaT" for v in values], dtype="datetime64[D]")
    except ValueError:  # not a date numpy reads: pandas' parser says what it makes of it
        return None


def _ranks(keys: np.ndarray) -> np.ndarray:
    """1..N by the keys (bytewise); equal keys keep their order."""
    order = np.argsort(keys, kind="stable")
    ranks = np.empty(len(order), dtype=np.int64)
    ranks[order] = np.arange(1, len(order) + 1)
    return ranks


def service_rank(frame: pd.DataFrame) -> pd.Series:
    """Service-list order 1..N (index as frame's), by service_order_keys; equal keys keep the frame's order."""
    return pd.Series(_ranks(service_order_keys(frame)), index=frame.index, name="rank")
