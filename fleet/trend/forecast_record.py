"""The forecast record: how the forecasts made months before a service interval ended compare with what happened.

Each analysis forecasts, per pump, the date its governing limit will be reached and a band around it. When the
interval ends (an overhaul, a replacement, or readings crossing a limit), the forecasts made about 3, 6 and 12
months earlier are looked up and scored: how many days early or late they were, and whether the band held the
date. Storage and display live elsewhere; this is the arithmetic, data in and tables out.

An overhaul done before the limit, on a plan or for another fault, ends an interval early: its forecasts then
look late. Rows keep how each interval ended, so the record can be read per outcome.
"""

from dataclasses import dataclass

import numpy as np
import pandas as pd

FORECAST_COLUMNS = {
    "pump_id": "int",
    "kind": "str, the pump kind",
    "made_at": "datetime64, when the analysis made the forecast",
    "limit_date": "datetime64 or NaT, forecast date of reaching the governing limit (NaT: none expected)",
    "limit_date_low": "datetime64 or NaT, the band's early edge",
    "limit_date_high": "datetime64 or NaT, the band's late edge (NaT: open)",
}
OUTCOME_COLUMNS = {
    "pump_id": "int",
    "ended_at": "datetime64, when the interval ended",
    "how": "str: overhaul, replacement or limit_crossed",
}
LEADS_DAYS = {"3 months": 91, "6 months": 182, "12 months": 365}


@dataclass
class ForecastRecord:
    """rows: one per (outcome, lead) whose forecast was found; summary: one per (kind, lead)."""

    rows: pd.DataFrame
    summary: pd.DataFrame


def _matched(forecasts: pd.DataFrame, outcomes: pd.DataFrame, lead_name: str, lead_days: float, tolerance: float):
    """For each outcome, the pump's forecast made nearest to `lead_days` before it, within the tolerance and
    inside the same interval (after the pump's previous outcome, before this one)."""
    target = outcomes.assign(target_at=outcomes["ended_at"] - pd.to_timedelta(lead_days, unit="D"))
    target = target.sort_values("target_at", kind="stable")
    f = forecasts.sort_values("made_at", kind="stable")
    found = pd.merge_asof(target, f, left_on="target_at", right_on="made_at", by="pump_id", direction="nearest",
                          tolerance=pd.Timedelta(days=tolerance))
    inside = (found["made_at"] < found["ended_at"]) & (
        found["previous_end"].isna() | (found["made_at"] > found["previous_end"])
    )
    found = found[found["made_at"].notna() & inside].copy()
    found["lead"] = lead_name
    return found


def forecast_record(forecasts: pd.DataFrame, outcomes: pd.DataFrame, leads: dict[str, float] | None = None,
                    tolerance_share: float = 0.25) -> ForecastRecord:
    """Score past forecasts against the ends of the intervals they were about.

    forecasts: FORECAST_COLUMNS, any number per pump. outcomes: OUTCOME_COLUMNS, one per ended interval.
    leads: name -> days before the end (default 3, 6 and 12 months); a forecast counts for a lead when it was
    made within tolerance_share x lead days of that moment (the nearest one is taken).

    rows: pump_id, kind, how, lead, made_at, ended_at, lead_days (actual), limit_date, limit_date_low,
    limit_date_high, error_days (forecast date minus the end: > 0 the forecast was late, < 0 early; NaN with
    no forecast date), relative_error (error_days / lead_days), band_held (the end within the band; an open
    late edge holds everything after the early edge; False with no forecast date), no_forecast.

    summary per (kind, lead): outcomes, no_forecast (forecasts that expected no limit), median_error_days,
    median_abs_error_days, median_relative_error, share_early, share_late, band_held (share of the forecasts
    with a date). NaN where there is nothing to score.
    """
    leads = LEADS_DAYS if leads is None else leads
    out_cols = ["pump_id", "ended_at", "how"]
    o = outcomes[out_cols].copy()
    o["ended_at"] = pd.to_datetime(o["ended_at"])
    o = o.sort_values(["pump_id", "ended_at"], kind="stable")
    o["previous_end"] = o.groupby("pump_id")["ended_at"].shift(1)
    f = forecasts[list(FORECAST_COLUMNS)].copy()
    for col in ("made_at", "limit_date", "limit_date_low", "limit_date_high"):
        f[col] = pd.to_datetime(f[col])
    parts = [_matched(f, o, name, days, tolerance_share * days) for name, days in leads.items()]
    rows = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()
    day = pd.Timedelta(days=1)
    rows["lead_days"] = (rows["ended_at"] - rows["made_at"]) / day
    rows["error_days"] = (rows["limit_date"] - rows["ended_at"]) / day
    rows["relative_error"] = rows["error_days"] / rows["lead_days"]
    rows["no_forecast"] = rows["limit_date"].isna()
    after_low = rows["limit_date_low"].isna() | (rows["limit_date_low"] <= rows["ended_at"])
    before_high = rows["limit_date_high"].isna() | (rows["ended_at"] <= rows["limit_date_high"])
    rows["band_held"] = ~rows["no_forecast"] & after_low & before_high
    rows = rows[["pump_id", "kind", "how", "lead", "made_at", "ended_at", "lead_days", "limit_date",
                 "limit_date_low", "limit_date_high", "error_days", "relative_error", "band_held", "no_forecast"]]
    rows = rows.sort_values(["kind", "lead", "ended_at", "pump_id"], kind="stable").reset_index(drop=True)
    return ForecastRecord(rows, _summary(rows, list(leads)))


def _summary(rows: pd.DataFrame, lead_order: list[str]) -> pd.DataFrame:
    dated = rows[~rows["no_forecast"]]
    g_all = rows.groupby(["kind", "lead"])
    g = dated.groupby(["kind", "lead"])
    summary = pd.DataFrame({
        "outcomes": g_all.size(),
        "no_forecast": g_all["no_forecast"].sum(),
        "median_error_days": g["error_days"].median(),
        "median_abs_error_days": g["error_days"].agg(lambda e: float(np.median(np.abs(e)))),
        "median_relative_error": g["relative_error"].median(),
        "share_early": g["error_days"].agg(lambda e: float(np.mean(e < 0))),
        "share_late": g["error_days"].agg(lambda e: float(np.mean(e > 0))),
        "band_held": g["band_held"].mean(),
    }).reset_index()
    summary["outcomes"] = summary["outcomes"].astype(np.int64)
    summary["no_forecast"] = summary["no_forecast"].astype(np.int64)
    summary["lead"] = pd.Categorical(summary["lead"], categories=lead_order, ordered=True)
    summary = summary.sort_values(["kind", "lead"], kind="stable").reset_index(drop=True)
    summary["lead"] = summary["lead"].astype(str)
    return summary
