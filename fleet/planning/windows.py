"""Which planned shutdown window suits each pump's overhaul. Data frames in, one row per pump out.

A window covers a pump when it is for the pump's machine, or for the pump's whole site. The best window is the
last one that still starts before the early bound of the forecast limit date (it uses most of the pump's life at
little risk); failing that, the last one before the expected date; failing that, the pump is at risk of reaching
its limit before any window. A pump expected after the plan's horizon, on it only because the early bound of a wide
band falls inside, gets no window: overhauling it now would throw away most of its life on the strength of the
band's tail, and the band narrows as its readings come in.
"""

import numpy as np
import pandas as pd

# How a pump fits the windows, most comfortable first; the words are shown on the plan.
FIT_WORDS = {
    "in_time": "window before the early bound",
    "tight": "window before the expected date, after the early bound",
    "at_risk": "no window before the expected date: may reach its limit first",
    "past_limit": "already past its limit: take the next window or stop sooner",
    "beyond_horizon": "expected after this horizon, only its early bound inside: no window yet; keep up its readings",
    "no_forecast": "no forecast date",
}


def match_windows(pumps: pd.DataFrame, windows: pd.DataFrame, today, horizon_end=None) -> pd.DataFrame:
    """Fit of every pump to the windows; with ``horizon_end``, a pump expected after it is 'beyond_horizon'.

    pumps: pump_id, site_id, machine_id, limit_date, limit_date_low, past_limit (bool).
    windows: window_id, site_id (or NaN), machine_id (or NaN), starts_at, ends_at.
    Returns, indexed by pump_id: fit (a key of FIT_WORDS), window_id (the chosen window, NaN if none),
    next_window_id (the first window still to come that covers the pump).
    """
    today = pd.Timestamp(today).normalize()
    out = pd.DataFrame(index=pd.Index(pumps["pump_id"], name="pump_id"))
    expected = pd.to_datetime(pumps["limit_date"]).to_numpy()
    early = pd.to_datetime(pumps["limit_date_low"]).fillna(pd.to_datetime(pumps["limit_date"])).to_numpy()
    past = pumps["past_limit"].eq(True).to_numpy()

    upcoming = windows[pd.to_datetime(windows["ends_at"]) >= today]
    pairs = _covering_pairs(pumps, upcoming)
    pairs = pairs.sort_values(["pump_id", "starts_at"], kind="stable")
    first = pairs.groupby("pump_id")["window_id"].first()
    out["next_window_id"] = first.reindex(out.index)

    lookup = pd.DataFrame({"expected": expected, "early": early}, index=out.index)
    pairs = pairs.join(lookup, on="pump_id")
    before_early = pairs[pairs["starts_at"] <= pairs["early"]].groupby("pump_id")["window_id"].last()
    before_expected = pairs[pairs["starts_at"] <= pairs["expected"]].groupby("pump_id")["window_id"].last()

    has_date = ~pd.isna(expected)
    beyond = has_date & (expected > np.datetime64(pd.Timestamp(horizon_end).normalize()) if horizon_end is not None
                         else np.zeros(len(out), dtype=bool))
    in_time = before_early.reindex(out.index)
    tight = before_expected.reindex(out.index)
    fit = np.select(
        [past, ~has_date, beyond, in_time.notna().to_numpy(), tight.notna().to_numpy()],
        ["past_limit", "no_forecast", "beyond_horizon", "in_time", "tight"],
        default="at_risk",
    )
    chosen = np.where(fit == "in_time", in_time, np.where(fit == "tight", tight, out["next_window_id"]))
    out["fit"] = fit
    out["window_id"] = np.where(np.isin(fit, ["no_forecast", "beyond_horizon"]), np.nan, chosen.astype(float))
    return out


def _covering_pairs(pumps: pd.DataFrame, windows: pd.DataFrame) -> pd.DataFrame:
    """(pump_id, window_id, starts_at) for every window that covers a pump: its machine's or its site's."""
    columns = ["window_id", "starts_at"]
    w = windows.assign(starts_at=pd.to_datetime(windows["starts_at"]))
    p = pumps[["pump_id", "site_id", "machine_id"]].astype({"site_id": float, "machine_id": float})
    w = w.astype({"site_id": float, "machine_id": float})
    by_machine = p.merge(w[w["machine_id"].notna()][columns + ["machine_id"]], on="machine_id")
    by_site = p.merge(w[w["machine_id"].isna() & w["site_id"].notna()][columns + ["site_id"]], on="site_id")
    keep = ["pump_id", *columns]
    return pd.concat([by_machine[keep], by_site[keep]], ignore_index=True)
