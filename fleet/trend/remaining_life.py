"""Hours and calendar dates until each limit, from a pump's own trend, with honest bounds.

The limit on eta_v,ref becomes a limit on the referred slip, (1 - eta_limit) x rated flow; the case drain
limit is pct / 100 x max flow. On the log scale the fitted line ln q = a + b h reaches ln(limit) at
h* = (ln limit - a) / b. The bounds are a Fieller (inverse prediction) interval of that crossing for the
fitted mean line, t distribution with n - 2 degrees of freedom (ISO 13381-1 asks a prognosis to name its
limit and carry a confidence figure).
"""

import numpy as np
import pandas as pd

from fleet.trend.degradation import QUANTITIES, not_enough_reason
from fleet.trend.linear import LineFit, fieller_crossing, line_variance, t_quantile
from fleet.trend.settings import AnalysisSettings

LIMIT_NAMES = {"slip": "eta_v", "drain": "case_drain"}


def _line_fit(fits: pd.DataFrame, q: str) -> LineFit:
    col = lambda name: fits[f"{q}_{name}"].to_numpy(dtype=float)  # noqa: E731
    return LineFit(
        a=col("a"),
        b=col("b"),
        var_a=col("var_a"),
        var_b=col("var_b"),
        cov_ab=col("cov_ab"),
        scale=col("scale"),
        dof=col("dof"),
        n_points=col("n_points"),
        x_mean=np.full(len(fits), np.nan),
    )


def limit_flows_lpm(eta_v_limit, drain_limit_pct, rated_flow_lpm, max_flow_lpm) -> dict[str, np.ndarray]:
    """Referred slip and case drain (L/min) at which each limit is reached."""
    return {
        "slip": (1.0 - np.asarray(eta_v_limit, dtype=float)) * np.asarray(rated_flow_lpm, dtype=float),
        "drain": np.asarray(drain_limit_pct, dtype=float) / 100.0 * np.asarray(max_flow_lpm, dtype=float),
    }


def hours_to_limits(fits: pd.DataFrame, limits_lpm: dict[str, np.ndarray], settings: AnalysisSettings) -> pd.DataFrame:
    """Remaining hours to each limit and to the governing one, for every fitted pump interval.

    Per limit q (slip -> eta_v, drain -> case_drain): q_crossing_hours (interval hours at the crossing),
    q_hours_to_limit, q_hours_low, q_hours_high (remaining hours, 0 once past), q_upper_open (no finite
    upper bound: slope not significantly positive), q_past (the fitted value is beyond the limit now) and
    q_note (a sentence when no figure can be given). Then governing_limit, hours_to_limit,
    hours_to_limit_low, hours_to_limit_high, upper_bound_open for the limit reached first.
    """
    out = pd.DataFrame(index=fits.index)
    now_h = fits["current_hours"].to_numpy(dtype=float)
    for q in QUANTITIES:
        fit = _line_fit(fits, q)
        limit = np.asarray(limits_lpm[q], dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_limit = np.where(limit > 0, np.log(np.where(limit > 0, limit, 1.0)), np.nan)
        x_hat, x_low, x_high, _ = fieller_crossing(fit, log_limit, settings.confidence)
        enough = fits[f"{q}_enough_data"].to_numpy(dtype=bool)
        has_limit = np.isfinite(log_limit)
        current = fits[f"{q}_current_lpm"].to_numpy(dtype=float)
        past = enough & has_limit & (current >= limit)
        usable = enough & has_limit

        with np.errstate(invalid="ignore"):
            remaining = np.where(past, 0.0, np.maximum(x_hat - now_h, 0.0))
            low = np.maximum(np.where(np.isneginf(x_low), now_h, x_low) - now_h, 0.0)
            high = np.where(np.isposinf(x_high), np.nan, np.maximum(x_high - now_h, 0.0))
        upper_open = usable & np.isposinf(x_high)
        no_crossing = usable & ~past & ~(fit.b > 0)
        low = np.where(np.isposinf(x_low), np.nan, low)  # a significant improvement: never reached

        out[f"{q}_crossing_hours"] = np.where(usable, x_hat, np.nan)
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

    hours = np.column_stack([out[f"{q}_hours_to_limit"].to_numpy(dtype=float) for q in QUANTITIES])
    any_finite = np.isfinite(hours).any(axis=1)
    first = np.argmin(np.where(np.isfinite(hours), hours, np.inf), axis=1)
    names = np.array([LIMIT_NAMES[q] for q in QUANTITIES], dtype=object)
    out["governing_limit"] = np.where(any_finite, names[first], None)
    rows = np.arange(len(out))
    for col in ("hours_to_limit", "hours_low", "hours_high", "upper_open"):
        stacked = np.column_stack([out[f"{q}_{col}"].to_numpy() for q in QUANTITIES])
        picked = stacked[rows, first]
        target = {"hours_low": "hours_to_limit_low", "hours_high": "hours_to_limit_high"}.get(col, col)
        if col == "upper_open":
            out["upper_bound_open"] = np.where(any_finite, picked.astype(bool), False)
        else:
            out[target] = np.where(any_finite, picked.astype(float), np.nan)
    return out


_TREND_WORDS = {"slip": "volumetric efficiency", "drain": "case drain"}


def hours_per_day(readings: pd.DataFrame, settings: AnalysisSettings) -> pd.Series:
    """Running hours per calendar day per (pump_id, interval_no), from the pump's own hour meter.

    Uses the readings of the last `hours_per_day_window_days` before the interval's last reading, falling
    back to the whole interval when those span less than a week. NaN with no usable span; clipped to 0..24.
    """
    r = readings.loc[
        np.isfinite(pd.to_numeric(readings["hours"], errors="coerce")) & readings["taken_at"].notna(),
        ["pump_id", "interval_no", "taken_at", "hours"],
    ]
    keys = ["pump_id", "interval_no"]
    last_at = r.groupby(keys)["taken_at"].transform("max")
    recent = r[r["taken_at"] >= last_at - pd.Timedelta(days=settings.hours_per_day_window_days)]

    def rate(frame: pd.DataFrame) -> tuple[pd.Series, pd.Series]:
        g = frame.groupby(keys)
        days = (g["taken_at"].max() - g["taken_at"].min()).dt.total_seconds() / 86400.0
        run = g["hours"].max() - g["hours"].min()
        return run, days

    run_recent, days_recent = rate(recent)
    run_all, days_all = rate(r)
    use_recent = days_recent.reindex(days_all.index) >= 7.0
    run = run_recent.reindex(days_all.index).where(use_recent, run_all)
    days = days_recent.reindex(days_all.index).where(use_recent, days_all)
    per_day = (run / days.where(days > 0)).clip(lower=0.0, upper=24.0)
    return per_day.rename("hours_per_day")


def limit_dates(last_reading_at: pd.Series, remaining_hours, per_day) -> pd.Series:
    """Calendar date a remaining number of running hours is used up at the pump's own hours per day."""
    rem = np.asarray(remaining_hours, dtype=float)
    rate = np.asarray(per_day, dtype=float)
    ok = np.isfinite(rem) & np.isfinite(rate) & (rate > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        days = np.where(ok, rem / np.where(ok, rate, 1.0), np.nan)
    days = np.minimum(days, 365.0 * 200)  # beyond any plan; keeps the timestamp in range
    offset = pd.to_timedelta(days, unit="D")
    return (pd.to_datetime(last_reading_at).reset_index(drop=True) + pd.Series(offset)).dt.normalize()


def trend_band(fit, hours_grid, qmax, confidence: float = 0.90, quantity: str = "slip") -> pd.DataFrame:
    """Fitted eta_v,ref (or case drain % for quantity="drain") on a grid of interval hours, with its band.

    fit: one row of FleetAnalysis.fits (a mapping with slip_a, slip_b, slip_var_a, ...). qmax: the rated
    flow for eta_v,ref (V_g n_r / 1000) or the max flow for drain %. Returns hours, mean, low, high where
    low/high bound the fitted mean line at the confidence level.
    """
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
