"""Store a full analysis part by part: each part's rows whole or not at all, then the fleet's refit and order.

The whole-fleet counterpart of fleet.services.analysis.store.store, for the parts a full analysis writes to files
(fleet.services.analysis.spool): each part is read from its file and stored (results, status changes and their
alerts, interval trends, service lives, forecast snapshots) before the next is read, so memory holds one part,
never the fleet. Each row is stored with its service order key; then, as after any full analysis, every kind's
fleet life figures are refitted from the stored service lives and every key is checked (rows the analysis did not
store keep theirs). store_spooled does all of it in the caller's one transaction; a refresh
(fleet.services.analysis.refresh.fleet_afresh) stores each part in its own short write as soon as it is computed,
and finishes in one more, so no writer waits on the whole fleet's store.
The stored rows are those store() would write for the same analysis (tests/test_analysis_spooled.py).
"""

from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from sqlalchemy import JSON, Text, bindparam, cast, delete, insert, select
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, FleetPrior, IntervalTrend, Pump, ServiceLife
from fleet.jsonvalues import json_ready
from fleet.services.analysis.compute import Progress
from fleet.services.analysis.snapshots import keep_forecasts
from fleet.services.analysis.spool import SpooledAnalysis, SpooledPart, read_part
from fleet.services.analysis.store import (
    COLUMNS,
    ORDER_COLUMNS,
    PRIOR_COLUMNS,
    RefreshSummary,
    _record_changes,
    order_keys,
    refit_kinds,
    rerank,
)
from fleet.services.mail.outbox import queue_alerts
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import horizon_remaining_hours

# What a record takes of what is computed as its part is stored: its planning horizon in running hours (the prior
# figures themselves are derived when read, from the kinds' fleet life figures).
PRIOR_FIGURES = ("planning_horizon_hours",)


@dataclass
class StoredParts:
    """What the parts stored so far add up to: pumps stored, the kinds to refit, alerts queued, pumps by status."""

    pumps: int = 0
    kinds: set = field(default_factory=set)
    alerts: int = 0
    by_status: Counter = field(default_factory=Counter)

    def add(self, other: "StoredParts") -> None:
        self.pumps += other.pumps
        self.kinds |= other.kinds
        self.alerts += other.alerts
        self.by_status.update(other.by_status)


def store_spooled(session: Session, spooled: SpooledAnalysis, settings: AnalysisSettings | None = None,
                  progress: Progress | None = None) -> RefreshSummary:
    """Store every part of ``spooled`` where it is not older than what is stored; refit every kind's fleet life
    figures; check every service order key; all in ``session``'s transaction. ``progress(pumps done, pumps,
    label)`` after each part."""
    stored = StoredParts()
    for path in spooled.parts:
        stored.add(store_part(session, path, spooled.versions, spooled.computed_at))
        if progress:
            progress(stored.pumps, spooled.pumps, "storing analysis")
    return finish_fleet(session, stored, spooled.computed_at, settings)


def finish_fleet(session: Session, stored: StoredParts, computed_at, settings: AnalysisSettings | None = None,
                 ) -> RefreshSummary:
    """After the last part: refit the fleet life figures of every kind on record and every kind the parts
    touched, from the stored service lives, and check every service order key."""
    settings = settings or AnalysisSettings()
    refit_kinds(session, stored.kinds | set(session.scalars(select(FleetPrior.kind))), computed_at, settings)
    rerank(session)
    return RefreshSummary(stored.pumps, {str(k): int(v) for k, v in stored.by_status.items()}, True, computed_at,
                          stored.alerts)


def store_part(session: Session, path: Path, versions: dict[int, int], computed_at) -> StoredParts:
    """Store the part in ``path`` (its pumps whose stored analysis is not newer than ``versions`` says)."""
    part = read_part(path)
    ids = [int(p) for p in part.results.index]
    before = {pump_id: (version, kind) for pump_id, version, kind in session.execute(
        select(AnalysisResult.pump_id, AnalysisResult.data_version, AnalysisResult.detail["kind"].as_string())
        .where(AnalysisResult.pump_id.in_(ids)))}
    existing = set(session.scalars(select(Pump.id).where(Pump.id.in_(ids))))
    keep = [p for p in ids if p in existing and versions.get(p, 0) >= before.get(p, (-1,))[0]]
    position = {pump_id: n for n, pump_id in enumerate(ids)}
    kept = part.results.loc[keep].copy()
    _, horizon_hours = horizon_remaining_hours(kept, pd.Timestamp(computed_at))
    kept["planning_horizon_hours"] = horizon_hours
    records, details = [part.records[position[p]] for p in keep], [part.details[position[p]] for p in keep]
    for record, values in zip(records, zip(*(kept[name] for name in PRIOR_FIGURES), strict=True), strict=True):
        record.update(zip(PRIOR_FIGURES, (json_ready(value) for value in values), strict=True))
    # A pump whose kind changed leaves its former kind to refit too (as store's _kinds_to_refit does).
    kinds = set(kept["kind"].dropna()) | {before[p][1] for p in keep if p in before and before[p][1]}
    alerts = queue_alerts(session, _record_changes(session, records, computed_at))
    session.execute(delete(AnalysisResult).where(AnalysisResult.pump_id.in_(keep)))
    session.execute(delete(ServiceLife).where(ServiceLife.pump_id.in_(keep)))
    session.execute(delete(IntervalTrend).where(IntervalTrend.pump_id.in_(keep)))
    _insert_results(session, records, details, versions, computed_at)
    _insert_trends(session, part, keep, computed_at)
    keep_forecasts(session, records, computed_at)
    lives = part.lives[part.lives["pump_id"].isin(keep)]
    if len(lives):
        session.execute(insert(ServiceLife.__table__), [
            {"pump_id": int(p), "interval_no": int(n), "entry_hours": float(e), "life_hours": float(h),
             "failed": bool(f)}
            for p, n, e, h, f in zip(lives["pump_id"], lives["interval_no"], lives["entry_hours"],
                                     lives["life_hours"], lives["failed"], strict=True)])
    return StoredParts(len(records), kinds, alerts, Counter(kept["status"].value_counts().to_dict()))


def _json_text(session: Session, name: str):
    """A parameter carrying JSON text as it goes into a JSON column (not encoded again)."""
    text = bindparam(name, type_=Text())
    return text if session.get_bind().dialect.name == "sqlite" else cast(text, JSON)  # SQLite keeps JSON as text


def _insert_results(session: Session, records: list[dict], details: list[str], versions: dict[int, int],
                    computed_at) -> None:
    """The rows store's _insert_results writes, with each detail as the JSON text the worker encoded, and each
    pump's service order key."""
    if not records:
        return
    rows = []
    keys = order_keys(records)
    for record, detail, key in zip(records, details, keys, strict=True):
        rows.append({
            "pump_id": record["pump_id"], "computed_at": computed_at, "order_key": key,
            "detail_json": detail, "data_version": versions.get(record["pump_id"], 0),
            **{k: record.get(k) for k in (*COLUMNS, *ORDER_COLUMNS, *PRIOR_COLUMNS)},
        })
    session.execute(insert(AnalysisResult.__table__).values(detail=_json_text(session, "detail_json")), rows)


def _insert_trends(session: Session, part: SpooledPart, keep: list[int], computed_at) -> None:
    """Insert the part's interval trends, each fit as the JSON text the worker encoded."""
    trends = part.trends[part.trends["pump_id"].isin(keep)]
    if not len(trends):
        return
    session.execute(insert(IntervalTrend.__table__).values(fit=_json_text(session, "fit_json")), [
        {"pump_id": int(p), "interval_no": int(n), "computed_at": computed_at, "is_current": bool(c),
         "start_hours": json_ready(s), "current_hours": json_ready(h), "enough_data": bool(e), "fit_json": fit_json}
        for p, n, c, s, h, e, fit_json in zip(trends["pump_id"], trends["interval_no"], trends["is_current"],
                                               trends["start_hours"], trends["current_hours"], trends["enough_data"],
                                               trends["fit_json"], strict=True)])
