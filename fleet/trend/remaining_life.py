"""Hours and calendar dates until each limit, from a pump's own trend, with honest bounds.

The limit on eta_v,ref becomes a limit on the referred slip, (1 - eta_limit) x rated flow; the case drain
limit is pct / 100 x max flow. The forecast is where the trend of the most weighted wear law reaches it;
the bounds span the crossing bands of every law the readings cannot rule out, each the quantiles of that
crossing under its fitted mean lines, which for a single line is the Fieller (inverse prediction)
interval (ISO 13381-1 asks a prognosis to name its limit and carry a confidence figure).
"""

import numpy as np
import pandas as pd

from fleet.trend.degradation import QUANTITIES, not_enough_reason
from fleet.trend.grouped import group_max, group_min, time_span_days, within_days_of_last
from fleet.trend.linear import LineFit, line_variance, t_quantile
from fleet.trend.model_average import crossing_bands, value_band
from fleet.trend.settings import AnalysisSettings
from fleet.trend.wear_laws import LawFits

LIMIT_NAMES = {"slip": "eta_v", "drain": "case_drain"}


def limit_flows_lpm(eta_v_limit, drain_limit_pct, rated_flow_lpm, max_flow_lpm) -> dict[str, np.ndarray]:
    """Referred slip and case drain (L/min) at which each limit is reached."""
    return {
        "slip": (1.0 - np.asarray(eta_v_limit, dtype=float)) * np.asarray(rated_flow_lpm, dtype=float),
        "drain": np.asarray(drain_limit_pct, dtype=float) / 100.0 * np.asarray(max_flow_lpm, dtype=float),
    }


def hours_to_limits(fits: dict, laws: dict[str, LawFits], limits_lpm: dict[str, np.ndarray],
                    settings: AnalysisSettings) -> dict[str, np.ndarray]:
    """Remaining hours to each limit and to the governing one, for every fitted pump interval.

    fits: fit_degradation's columns with summarise_fits' figures; laws: each quantity's fitted laws (its rows as the
    table's). Returns the columns below as arrays by name.

    The crossing comes from the weighed wear laws (fleet.trend.model_average.crossing_band): the median
    crossing of the heaviest law is the forecast, the union of the (1 - confidence) / 2 to (1 + confidence) / 2
    crossing bands of the laws the readings cannot rule out the bounds. Per limit q (slip -> eta_v,
    drain -> case_drain): q_crossing_hours, q_crossing_low, q_crossing_high (interval hours at the crossing
    and its bounds, also for a limit already passed; NaN where open), q_hours_to_limit, q_hours_low,
    q_hours_high (remaining hours, 0 once past), q_upper_open (no finite upper bound: the trend may stay
    below the limit), q_past (the averaged trend is beyond the limit now) and q_note (a sentence when no
    figure can be given). Then governing_limit, hours_to_limit, hours_to_limit_low, hours_to_limit_high,
    upper_bound_open for the limit reached first.
    """
    out = {}
    now_h = np.asarray(fits["current_hours"], dtype=float)
    limits, usables = {}, {}
    for q in QUANTITIES:
        limits[q] = np.asarray(limits_lpm[q], dtype=float)
        usables[q] = np.asarray(fits[f"{q}_enough_data"], dtype=bool) & np.isfinite(limits[q]) & (limits[q] > 0)
    # Both limits' crossings, every law's, in one search (for one pump its steps' fixed cost is most of it).
    bands = crossing_bands([(laws[q], np.where(usables[q], limits[q], np.nan), now_h) for q in QUANTITIES],
                           settings.confidence)
    for q, (x_low, x_hat, x_high) in zip(QUANTITIES, bands, strict=True):
        limit, usable = limits[q], usables[q]
        has_limit = np.isfinite(limit) & (limit > 0)
        current = np.asarray(fits[f"{q}_current_lpm"], dtype=float)
        past = usable & (current >= limit)

        with np.errstate(invalid="ignore"):
            remaining = np.where(past, 0.0, np.maximum(x_hat - now_h, 0.0))
            low = np.maximum(x_low - now_h, 0.0)
            high = np.maximum(x_high - now_h, 0.0)
        upper_open = usable & np.isnan(x_high)
        no_crossing = usable & ~past & np.isnan(x_hat)

        out[f"{q}_crossing_hours"] = np.where(usable, x_hat, np.nan)
        out[f"{q}_crossing_low"] = np.where(usable, x_low, np.nan)
        out[f"{q}_crossing_high"] = np.where(usable, x_high, np.nan)
        out[f"{q}_hours_to_limit"] = np.where(usable, remaining, np.nan)
        out[f"{q}_hours_low"] = np.where(usable, low, np.nan)
        out[f"{q}_hours_high"] = np.where(usable, high, np.nan)
        out[f"{q}_upper_open"] = upper_open
        out[f"{q}_past"] = past
        note = not_enough_reason(fits[f"{q}_n_points"], fits[f"{q}_span_hours"], settings, _TREND_WORDS[q])
        note = np.where(
            no_crossing,
            f"The {_TREND_WORDS[q]} trend is flat or improving: no crossing of its limit is expected.",
            note,
        )
        out[f"{q}_note"] = np.where(has_limit, note, None)

    hours = np.column_stack([out[f"{q}_hours_to_limit"] for q in QUANTITIES])
    any_finite = np.isfinite(hours).any(axis=1)
    first = np.argmin(np.where(np.isfinite(hours), hours, np.inf), axis=1)
    names = np.array([LIMIT_NAMES[q] for q in QUANTITIES], dtype=object)
    out["governing_limit"] = np.where(any_finite, names[first], None)
    rows = np.arange(len(now_h))
    for col in ("hours_to_limit", "hours_low", "hours_high", "upper_open"):
        stacked = np.column_stack([out[f"{q}_{col}"] for q in QUANTITIES])
        picked = stacked[rows, first]
        target = {"hours_low": "hours_to_limit_low", "hours_high": "hours_to_limit_high"}.get(col, col)
        if col == "upper_open":
            out["upper_bound_open"] = np.where(any_finite, picked.astype(bool), False)
        else:
            out[target] = np.where(any_finite, picked.astype(float), np.nan)
    return out


_TREND_WORDS = {"slip": "volumetric efficiency", "drain": "case drain"}


def _dated_hours(taken: np.ndarray, hours: np.ndarray) -> np.ndarray:
    return np.isfinite(hours) & ~np.isnat(taken)


def interval_hours_per_day(group: np.ndarray, taken: np.ndarray, hours: np.ndarray, n_groups: int,
                           settings: AnalysisSettings) -> np.ndarray:
    """Running hours per calendar day of each pump interval (readings' group codes 0..n_groups-1, their times and
    hour-meter values), from the pump's own hour meter.

    Uses the readings of the last `hours_per_day_window_days` before the interval's last reading, falling
    back to the whole interval when those span less than a week. NaN with no usable span; clipped to 0..24.
    """
    usable = _dated_hours(taken, hours)
    g, t, h = group[usable], taken[usable], hours[usable]
    recent = within_days_of_last(g, t, n_groups, settings.hours_per_day_window_days)

    def rate(keep):
        run = group_max(g[keep], h[keep], n_groups) - group_min(g[keep], h[keep], n_groups)
        return run, time_span_days(g[keep], t[keep], n_groups)

    run_recent, days_recent = rate(recent)
    run_all, days_all = rate(np.ones(len(g), dtype=bool))
    use_recent = days_recent >= 7.0
    run = np.where(use_recent, run_recent, run_all)
    days = np.where(use_recent, days_recent, days_all)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.clip(run / np.where(days > 0, days, np.nan), 0.0, 24.0)


def limit_dates(last_reading_at: pd.Series, remaining_hours, per_day) -> pd.Series:
    """Calendar date a remaining number of running hours is used up at the pump's own hours per day."""
    rem = np.asarray(remaining_hours, dtype=float)
    rate = np.asarray(per_day, dtype=float)
    ok = np.isfinite(rem) & np.isfinite(rate) & (rate > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        days = np.where(ok, rem / np.where(ok, rate, 1.0), np.nan)
    days = np.minimum(days, 365.0 * 200)  # beyond any plan; keeps the timestamp in range
    offset = pd.to_timedelta(days, unit="D").to_numpy()  # pandas' rounding of days to its time unit
    if isinstance(last_reading_at, pd.Series) and last_reading_at.dtype.kind == "M":
        last = last_reading_at.to_numpy()  # already times: pd.to_datetime would give them back as they are
    else:
        last = np.asarray(pd.to_datetime(last_reading_at))
    moved = last + offset  # plain arrays: numpy keeps the finer unit, as pandas' sum of the two does
    day = moved.astype("datetime64[D]").astype(moved.dtype)  # midnight of that day (dt.normalize); NaT stays
    return pd.Series(day)


def trend_band(fit, hours_grid, qmax, confidence: float = 0.90, quantity: str = "slip") -> pd.DataFrame:
    """Fitted eta_v,ref (or case drain % for quantity="drain") on a grid of interval hours, with its band.

    fit: one row of FleetAnalysis.fits. Such a row carries the wear laws, and the band is then the
    model-averaged one (averaged_band), which meets the limit where hours_to_limits says. A mapping with only
    an exponential line (slip_a, slip_b, slip_var_a, ...) gives that line's band. qmax: the rated flow for
    eta_v,ref (V_g n_r / 1000) or the max flow for drain %. Returns hours, mean, low, high where low/high bound
    the fitted mean line at the confidence level.
    """
    if f"{quantity}_hours_scale" in fit:
        return averaged_band(fit, hours_grid, qmax, confidence, quantity)
    h = np.asarray(hours_grid, dtype=float)
    get = lambda name: np.asarray([float(fit[f"{quantity}_{name}"])])  # noqa: E731
    line = LineFit(
        get("a"),
        get("b"),
        get("var_a"),
        get("var_b"),
        get("cov_ab"),
        get("scale"),
        get("dof"),
        get("n_points"),
        get("a") * np.nan,
    )
    centre = line.a[0] + line.b[0] * h
    half = t_quantile(confidence, line.dof)[0] * np.sqrt(np.maximum(line_variance(line, h, 0), 0.0))
    with np.errstate(over="ignore"):
        lo_flow, mid_flow, hi_flow = np.exp(centre - half), np.exp(centre), np.exp(centre + half)
    if quantity == "slip":
        mean, low, high = 1.0 - mid_flow / qmax, 1.0 - hi_flow / qmax, 1.0 - lo_flow / qmax
    else:
        mean, low, high = 100.0 * mid_flow / qmax, 100.0 * lo_flow / qmax, 100.0 * hi_flow / qmax
    return pd.DataFrame({"hours": h, "mean": mean, "low": low, "high": high})


def dates_at_hours(readings: pd.DataFrame, keys: pd.DataFrame, interval_hours, per_day) -> pd.Series:
    """Calendar date at which each pump interval's hour meter showed `interval_hours` (hours in the interval).

    Between two readings the date is interpolated from their hour-meter values; before the first or after the
    last reading it is extrapolated at the interval's hours per day. keys: pump_id, interval_no per target
    (same length as interval_hours and per_day). NaT where a figure is missing.

    The readings around each target are found on arrays (_readings_around: a pandas merge_asof's choice, ties
    and all), and the arithmetic is pandas' own on them, so one pump's few targets pay no frame's overhead
    (tests/test_trend_remaining_life.py keeps the merge_asof code as the reference it must equal).
    """
    hours = np.asarray(interval_hours, dtype=float)
    known = np.flatnonzero(np.isfinite(hours))  # the targets dated (the others NaT)
    h = hours[known]
    rate = np.asarray(per_day, dtype=float)[known]
    r_hours = pd.to_numeric(readings["interval_hours"], errors="coerce").to_numpy(dtype=float)
    r_taken = pd.to_datetime(readings["taken_at"])
    usable = np.isfinite(r_hours) & r_taken.notna().to_numpy()
    r_taken = r_taken.to_numpy()[usable]
    r_hours = r_hours[usable]
    before, after = _readings_around(
        readings["pump_id"].to_numpy()[usable].astype(np.int64), readings["interval_no"].to_numpy()[usable].astype(
            np.int64), r_hours, keys["pump_id"].to_numpy()[known].astype(np.int64),
        keys["interval_no"].to_numpy()[known].astype(np.int64), h)
    # None found (-1) takes the last place: a missing reading's NaN hours and NaT time, set after the readings.
    r_hours, r_taken = np.append(r_hours, np.nan), np.append(r_taken, np.datetime64("NaT"))
    h_b, h_f, t_b, t_f = r_hours[before], r_hours[after], r_taken[before], r_taken[after]
    span_days = pd.TimedeltaIndex(t_f - t_b).total_seconds().to_numpy() / 86400.0
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(h_f > h_b, (h - h_b) / (h_f - h_b), 0.0)
        # pd.to_timedelta picks its unit from the values (whole days give a coarser one), and Series.where keeps
        # the first's unit where the others' values fit it: both left to pandas, as the merge_asof code did.
        inside = t_b + pd.to_timedelta(share * np.where(np.isnan(span_days), 0.0, span_days), unit="D").to_numpy()
        ahead = t_b + pd.to_timedelta(np.where(rate > 0, (h - h_b) / rate, np.nan), unit="D").to_numpy()
        behind = t_f - pd.to_timedelta(np.where(rate > 0, (h_f - h) / rate, np.nan), unit="D").to_numpy()
    has_b = ~np.isnat(t_b)
    date = pd.Series(inside).where(has_b & ~np.isnat(t_f), pd.Series(ahead).where(has_b, pd.Series(behind)))
    date = date.to_numpy()
    out = np.full(len(hours), np.datetime64("NaT"), dtype=date.dtype)
    out[known] = date
    return pd.Series(out.astype("datetime64[D]").astype(out.dtype))  # midnight of that day (dt.normalize)


def _readings_around(r_pump, r_interval, r_hours, pump, interval, hours):
    """Per target (pump, interval, hours): the index of its interval's reading at or before its hours (the last of
    equal ones in the readings' order) and of the one at or after them (the first of equal ones); -1 for none.
    A target whose hours are not finite gets -1 both ways."""
    n = len(r_hours)
    key1 = np.concatenate([r_pump, pump])
    key2 = np.concatenate([r_interval, interval])
    at = np.concatenate([r_hours, np.where(np.isfinite(hours), hours, np.nan)])
    target = np.r_[np.zeros(n, dtype=bool), np.ones(len(hours), dtype=bool)]
    found = []
    for direction in ("before", "after"):
        # Readings sorted beside the targets (before them at equal hours looking back, after them looking on),
        # equal readings in their own order (lexsort is stable).
        order = np.lexsort((target if direction == "before" else ~target, at, key2, key1))
        place = np.arange(len(order))
        is_reading = ~target[order]
        if direction == "before":
            near = np.maximum.accumulate(np.where(is_reading, place, -1))
        else:
            near = np.minimum.accumulate(np.where(is_reading, place, len(order))[::-1])[::-1]
        valid = (near >= 0) & (near < len(order))
        nearest = order[np.where(valid, near, 0)] if len(order) else order
        same = valid & (key1[nearest] == key1[order]) & (key2[nearest] == key2[order]) if len(order) else valid
        same &= np.isfinite(at[order])
        pick = np.full(len(order), -1)
        pick[order] = np.where(same, nearest, -1)
        found.append(pick[n:])
    return found[0], found[1]


def averaged_band(fit, hours_grid, qmax, confidence: float = 0.90, quantity: str = "slip") -> pd.DataFrame:
    """The model-averaged forecast of eta_v,ref (or case drain % for quantity="drain") on a grid of interval
    hours, with its band: what a chart of the pump's current interval draws.

    fit: one row of FleetAnalysis.fits. qmax: the rated flow for eta_v,ref or the max flow for drain %.
    Returns hours, mean (the heaviest law's median), low, high (the union of the plausible laws' bands); the
    mean and the band meet the limit exactly at the forecast and bounds of hours_to_limits (both come from
    fleet.trend.model_average's crossing_band and value_band, law by law).
    """
    laws = LawFits.from_columns(fit, quantity)
    h = np.asarray(hours_grid, dtype=float)
    lo, mid, hi = (edge[0] for edge in value_band(laws, h[None, :], confidence))
    h = h[None, :]
    if quantity == "slip":
        mean, low, high = 1.0 - mid / qmax, 1.0 - hi / qmax, 1.0 - lo / qmax
    else:
        mean, low, high = 100.0 * mid / qmax, 100.0 * lo / qmax, 100.0 * hi / qmax
    return pd.DataFrame({"hours": h[0], "mean": mean, "low": low, "high": high})
