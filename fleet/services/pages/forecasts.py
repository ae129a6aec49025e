"""The forecast record: how early or late this fleet's forecasts were, and how often their band held, per pump kind.

The forecasts are the snapshots the analysis store keeps (fleet.services.analysis.snapshots). A service interval
ends with an overhaul or a replacement, or with its readings crossing a limit: when the interval's latest
snapshot says its trend is past the limit, the interval counts as ended at the estimated crossing (the engine's
crossed_date), even when an overhaul came later; otherwise at the overhaul or replacement. An interval that has
neither ended nor crossed is not scored yet.

For each end, the forecast that stood 3, 6 and 12 months before it (the pump's latest snapshot at that moment,
inside the same interval) is scored by fleet.trend.forecast_record: days early or late, and whether the end fell
inside the band. A snapshot with too little data for a trend is no forecast and is left out.
"""

import numpy as np
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet.db.models import ForecastSnapshot, MaintenanceEvent, Pump
from fleet.jsonvalues import json_ready
from fleet.kinds import PUMP_KINDS, RESETS_INTERVAL
from fleet.trend.forecast_record import LEADS_DAYS, OUTCOME_COLUMNS, forecast_record

SUMMARY_COLUMNS = ("kind", "kind_label", "lead", "outcomes", "no_forecast", "median_error_days",
                   "median_abs_error_days", "median_relative_error", "share_early", "share_late", "band_held")
ROW_COLUMNS = ("pump", "kind", "kind_label", "how", "lead", "forecast_made_at", "standing_at", "ended_at",
               "lead_days", "limit_date", "limit_date_low", "limit_date_high", "error_days", "relative_error",
               "band_held", "no_forecast")
OUTCOME_WORDS = {"overhaul": "overhaul", "replacement": "replacement", "limit_crossed": "limit crossed"}


def _snapshots(session: Session) -> pd.DataFrame:
    rows = session.execute(select(
        ForecastSnapshot.pump_id, ForecastSnapshot.made_at, ForecastSnapshot.trend, ForecastSnapshot.past_limit,
        ForecastSnapshot.limit_date, ForecastSnapshot.limit_date_low, ForecastSnapshot.limit_date_high)).all()
    frame = pd.DataFrame(rows, columns=["pump_id", "made_at", "trend", "past_limit", "limit_date", "limit_date_low",
                                        "limit_date_high"])
    for column in ("made_at", "limit_date", "limit_date_low", "limit_date_high"):
        frame[column] = pd.to_datetime(frame[column]).astype("datetime64[ns]")
    return frame.astype({"trend": bool, "past_limit": bool})


def _resets(session: Session) -> pd.DataFrame:
    rows = session.execute(select(MaintenanceEvent.pump_id, MaintenanceEvent.date, MaintenanceEvent.kind)
                           .where(MaintenanceEvent.kind.in_(sorted(RESETS_INTERVAL)))).all()
    frame = pd.DataFrame(rows, columns=["pump_id", "date", "kind"])
    frame["date"] = pd.to_datetime(frame["date"]).astype("datetime64[ns]")
    return frame.sort_values(["pump_id", "date"], kind="stable").reset_index(drop=True)


def interval_outcomes(snapshots: pd.DataFrame, resets: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Each snapshot placed in its service interval, and how each interval with snapshots ended.

    snapshots: pump_id, made_at, trend, past_limit, limit_date... resets: pump_id, date, kind (overhauls and
    replacements). The interval of a moment is the number of resets of the pump up to it. Returns (snapshots with
    a `key` per (pump, interval), outcomes with key, pump_id, ended_at, how): one outcome per ended interval.
    """
    snaps = snapshots.sort_values("made_at", kind="stable").copy()
    dates = {p: g["date"].to_numpy() for p, g in resets.groupby("pump_id")}
    snaps["interval"] = [int(np.searchsorted(dates.get(p, np.array([], dtype="datetime64[ns]")), m.to_datetime64(),
                                             side="right"))
                         for p, m in zip(snaps["pump_id"], snaps["made_at"], strict=True)]
    keys = pd.MultiIndex.from_frame(snaps[["pump_id", "interval"]])
    snaps["key"] = pd.factorize(keys)[0].astype("int64")
    rows = []
    for (pump_id, interval), group in snaps.groupby(["pump_id", "interval"], sort=True):
        last = group.iloc[-1]
        pump_resets = resets[resets["pump_id"] == pump_id].reset_index(drop=True)
        reset = pump_resets.iloc[interval] if interval < len(pump_resets) else None
        if last["past_limit"] and pd.notna(last["limit_date"]):
            ended = last["limit_date"] if reset is None else min(last["limit_date"], reset["date"])
            rows.append((int(last["key"]), pump_id, ended, "limit_crossed"))
        elif reset is not None:
            rows.append((int(last["key"]), pump_id, reset["date"], reset["kind"]))
    outcomes = pd.DataFrame(rows, columns=["key", "pump_id", "ended_at", "how"]).astype({"key": "int64",
                                                                                       "pump_id": "int64"})
    # Forecasts are dates: compare by the day.
    outcomes["ended_at"] = pd.to_datetime(outcomes["ended_at"]).astype("datetime64[ns]").dt.normalize()
    return snaps, outcomes


def standing_forecasts(snaps: pd.DataFrame, outcomes: pd.DataFrame, leads: dict[str, float]) -> pd.DataFrame:
    """For each outcome and lead, the forecast that stood `lead` days before the end (the interval's latest
    snapshot at that moment), with made_at set to that moment and the snapshot's own time in forecast_made_at.
    Snapshots without a trend stand too (they end the one before) but are no forecast and are dropped."""
    parts = []
    # By the day, as the forecasts are: a forecast made during the day stands on that day.
    ordered = snaps.assign(made_day=snaps["made_at"].dt.normalize()).sort_values("made_day", kind="stable")
    for name, days in leads.items():
        target = outcomes.assign(standing_at=outcomes["ended_at"] - pd.Timedelta(days=days), lead=name)
        target = target.sort_values("standing_at", kind="stable")
        found = pd.merge_asof(target, ordered.drop(columns=["pump_id"]), left_on="standing_at", right_on="made_day",
                              by="key", direction="backward")
        parts.append(found[found["made_at"].notna() & found["trend"].astype("boolean").fillna(False).astype(bool)])
    columns = ["key", "pump_id", "lead", "standing_at", "made_at", "limit_date", "limit_date_low", "limit_date_high"]
    if not parts:
        return pd.DataFrame(columns=columns)
    found = pd.concat(parts, ignore_index=True)[columns]
    return found.rename(columns={"made_at": "forecast_made_at"})


def score(snapshots: pd.DataFrame, resets: pd.DataFrame, kinds: pd.Series,
          leads: dict[str, float] | None = None):
    """The forecast record of these snapshots: (rows, summary) of fleet.trend.forecast_record, rows with pump_id
    and the snapshot's own time (forecast_made_at) and the moment it was read at (standing_at)."""
    leads = LEADS_DAYS if leads is None else leads
    snapshots = snapshots.astype({c: "datetime64[ns]" for c in ("made_at", "limit_date", "limit_date_low",
                                                                "limit_date_high")})
    resets = resets.astype({"date": "datetime64[ns]"})
    snaps, outcomes = interval_outcomes(snapshots, resets)
    standing = standing_forecasts(snaps, outcomes, leads)
    forecasts = standing.assign(pump_id=standing["key"], kind=standing["pump_id"].map(kinds),
                                made_at=standing["standing_at"])
    ended = outcomes.assign(pump_id=outcomes["key"])[list(OUTCOME_COLUMNS)]
    record = forecast_record(forecasts, ended, leads, tolerance_share=0.01)
    rows = record.rows.merge(standing[["key", "pump_id", "lead", "forecast_made_at", "standing_at"]]
                             .rename(columns={"key": "row_key", "pump_id": "real_pump_id"}),
                             left_on=["pump_id", "lead"], right_on=["row_key", "lead"], how="left")
    rows = rows.drop(columns=["pump_id", "row_key"]).rename(columns={"real_pump_id": "pump_id"})
    return rows, record.summary, len(outcomes)


def forecast_record_page(session: Session) -> dict:
    """The forecast record page's data (and its JSON and CSV twins)."""
    pumps = pd.DataFrame(session.execute(select(Pump.id, Pump.serial, Pump.kind)).all(),
                         columns=["pump_id", "pump", "kind"]).set_index("pump_id")
    snapshots = _snapshots(session)
    rows, summary, ended = score(snapshots, _resets(session), pumps["kind"])
    rows = rows.assign(pump=rows["pump_id"].map(pumps["pump"]), kind_label=rows["kind"].map(PUMP_KINDS))
    summary = summary.assign(kind_label=summary["kind"].map(PUMP_KINDS))
    for column in ("forecast_made_at", "standing_at", "ended_at", "limit_date", "limit_date_low", "limit_date_high"):
        rows[column] = pd.to_datetime(rows[column]).dt.strftime("%Y-%m-%d")
    return json_ready({
        "leads": list(LEADS_DAYS),
        "lead_days": LEADS_DAYS,
        "summary": summary[list(SUMMARY_COLUMNS)].astype(object).to_dict(orient="records"),
        "forecasts": rows[list(ROW_COLUMNS)].astype(object).to_dict(orient="records"),
        "intervals_ended": int(ended),
        "snapshots": int(len(snapshots)),
        "pumps_with_snapshots": int(snapshots["pump_id"].nunique()),
        "first_snapshot_at": snapshots["made_at"].min() if len(snapshots) else None,
        "outcome_words": OUTCOME_WORDS,
    })
