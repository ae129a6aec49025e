"""Run the trend engine on stored data and keep its latest results, so pages read instead of recomputing.

A refresh of some pumps reuses the stored fleet priors (the Weibull of each kind) and re-ranks the whole
service list from stored figures; a full refresh refits everything.
"""

from collections.abc import Callable, Iterable
from dataclasses import dataclass
from datetime import datetime

import pandas as pd
from sqlalchemy import delete, select, update
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, FleetPrior, Pump, StatusChange
from fleet.services.fleetdata import FleetFrames, json_ready, load_frames
from fleet.timeutil import utcnow
from fleet.trend.engine import FleetAnalysis, analyze_fleet, apply_priors, fit_priors, results_to_records
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import service_rank

# The fields of the JSON contract (`fleet analyze --json`), each stored in its own column.
CONTRACT_FIELDS = (
    "pump", "status", "reasons", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit",
    "hours_to_limit_low", "hours_to_limit_high", "limit_date", "governing_limit", "prior_hours_to_overhaul",
    "energy_cost_per_year",
)
_COLUMNS = CONTRACT_FIELDS[1:]  # 'pump' is the serial, kept on the pump row

Progress = Callable[[int, int, str], None]
CHUNK_PUMPS = 400  # pumps analysed at once in a full refresh: bounds its memory (measured in benchmarks/run.py)


@dataclass
class RefreshSummary:
    pumps: int
    by_status: dict[str, int]
    full: bool
    computed_at: datetime

    def describe(self) -> str:
        scope = "fleet" if self.full else f"{self.pumps} pump(s)"
        counts = ", ".join(f"{n} {status.replace('_', ' ')}" for status, n in sorted(self.by_status.items()))
        return f"analysis refreshed for the {scope}: {counts or 'no pumps'}"


def pump_ids_for(session: Session, serials: Iterable[str]) -> list[int]:
    serials = list(serials)
    found = dict(session.execute(select(Pump.serial, Pump.id).where(Pump.serial.in_(serials))).all())
    missing = [s for s in serials if s not in found]
    if missing:
        raise LookupError(f"no pump {', '.join(repr(s) for s in missing)} in the register")
    return [found[s] for s in serials]


def stored_priors(session: Session) -> pd.DataFrame | None:
    rows = session.scalars(select(FleetPrior)).all()
    if not rows:
        return None
    frame = pd.DataFrame([{**row.detail} for row in rows], index=pd.Index([r.kind for r in rows], name="kind"))
    # JSON gives None for a kind without a fit; the engine wants NaN in float columns.
    for column in frame.columns:
        numbers = pd.to_numeric(frame[column], errors="coerce")
        if numbers.notna().sum() == frame[column].notna().sum():
            frame[column] = numbers.astype(float)
    return frame


def analyse(session: Session, pump_ids=None, now: datetime | None = None,
            settings: AnalysisSettings | None = None) -> FleetAnalysis:
    """Compute (without storing) the analysis of ``pump_ids`` (None: the fleet)."""
    return analyse_with_frames(session, pump_ids, now, settings)[0]


def analyse_with_frames(session: Session, pump_ids=None, now: datetime | None = None,
                        settings: AnalysisSettings | None = None) -> tuple[FleetAnalysis, FleetFrames]:
    """The analysis and the frames it was computed from (a page needs both; loading twice costs)."""
    now = now or utcnow()
    frames = load_frames(session, pump_ids, as_of=now)
    priors = None if pump_ids is None else stored_priors(session)
    analysis = analyze_fleet(frames.pumps, frames.readings, frames.events, frames.samples, frames.flow_points,
                             now=now, settings=settings, priors=priors)
    return analysis, frames


def analyse_results(session: Session, pump_ids=None, now: datetime | None = None,
                    settings: AnalysisSettings | None = None,
                    chunk_pumps: int = CHUNK_PUMPS) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """(results, refitted priors or None) of ``pump_ids`` (None: the fleet, priors refitted).

    The fleet is analysed ``chunk_pumps`` pumps at a time, so memory stays bounded by one part. A pump's
    figures depend only on its own data and the fleet priors; those are fitted once from every part's service
    intervals and then given to every pump (fleet.trend.engine.apply_priors), so the results are the same as
    one pass over the whole fleet.
    """
    now = now or utcnow()
    settings = settings or AnalysisSettings()
    if pump_ids is not None:
        return analyse(session, pump_ids, now, settings).results, None
    ids = list(session.scalars(select(Pump.id).order_by(Pump.id)))
    parts, intervals, kinds = [], [], []
    for first in range(0, max(len(ids), 1), chunk_pumps):
        chunk = ids[first:first + chunk_pumps] if ids else None
        part = analyse(session, chunk, now, settings) if chunk is not None else None
        if part is None:  # no pumps at all: the engine's own empty answer
            frames = load_frames(session, None, as_of=now)
            part = analyze_fleet(frames.pumps, frames.readings, frames.events, frames.samples,
                                 frames.flow_points, now=now, settings=settings)
            return part.results, part.priors
        parts.append(part.results)
        intervals.append(part.intervals)
        kinds.append(part.results["kind"])
    results = pd.concat(parts) if len(parts) > 1 else parts[0]
    if len(parts) > 1:  # each part ranked its own pumps: rank the fleet
        results["rank"] = service_rank(results).to_numpy()
    priors = fit_priors(pd.concat(intervals, ignore_index=True), pd.concat(kinds), settings)
    priors = apply_priors(results, priors, now)
    return results, priors


def refresh_analysis(session: Session, pump_ids=None, now: datetime | None = None,
                     settings: AnalysisSettings | None = None, progress: Progress | None = None) -> RefreshSummary:
    """Analyse ``pump_ids`` (None: the whole fleet) and store the results; never commits."""
    full = pump_ids is None or not _has_priors(session)
    ids = None if full else sorted({int(i) for i in pump_ids})
    computed_at = now or utcnow()
    results, priors = analyse_results(session, ids, computed_at, settings)
    records = results_to_records(results)
    if progress:
        progress(0, len(records), "storing analysis")
    _store_results(session, records, computed_at, replace_all=full)
    if full:
        _store_priors(session, priors, computed_at)
    _rerank(session)
    if progress:
        progress(len(records), len(records), "storing analysis")
    by_status = results["status"].value_counts().to_dict()
    return RefreshSummary(len(records), {str(k): int(v) for k, v in by_status.items()}, full, computed_at)


def _has_priors(session: Session) -> bool:
    return session.scalar(select(FleetPrior.kind).limit(1)) is not None


def _store_results(session: Session, records: list[dict], computed_at: datetime, replace_all: bool) -> None:
    ids = [record["pump_id"] for record in records]
    _record_changes(session, records, computed_at, None if replace_all else ids)
    if replace_all:
        session.execute(delete(AnalysisResult))
    elif ids:
        session.execute(delete(AnalysisResult).where(AnalysisResult.pump_id.in_(ids)))
    rows = []
    for record in records:
        detail = {k: v for k, v in record.items() if k not in _COLUMNS and k not in ("pump_id", "rank")}
        rows.append(AnalysisResult(
            pump_id=record["pump_id"], computed_at=computed_at, rank=record.get("rank") or 0,
            detail=json_ready(detail), **{k: record.get(k) for k in _COLUMNS},
        ))
    session.add_all(rows)
    session.flush()


def _record_changes(session: Session, records: list[dict], computed_at: datetime, pump_ids=None) -> None:
    """Append a StatusChange for every pump whose status or reasons differ from its stored analysis.

    pump_ids: the pumps of a partial refresh, so only their stored reasons are read (None: all).
    """
    statement = select(AnalysisResult.pump_id, AnalysisResult.status, AnalysisResult.reasons)
    if pump_ids is not None:
        statement = statement.where(AnalysisResult.pump_id.in_(pump_ids))
    previous = {pump_id: (status, reasons) for pump_id, status, reasons in session.execute(statement)}
    for record in records:
        before_status, before_reasons = previous.get(record["pump_id"], (None, []))
        reasons = record.get("reasons") or []
        if record["status"] == before_status and _reason_keys(reasons) == _reason_keys(before_reasons):
            continue
        known = _reason_keys(before_reasons)
        session.add(StatusChange(
            pump_id=record["pump_id"], at=computed_at, status=record["status"], previous_status=before_status,
            reasons=reasons, new_reasons=[r for r in reasons if _reason_key(r) not in known],
            eta_v_ref=record.get("eta_v_ref"), hours_to_limit=record.get("hours_to_limit"),
            limit_date=record.get("limit_date"),
        ))


def _reason_key(reason: str) -> str:
    """A reason without its figures, so 'eta_v,ref 0.91' and 'eta_v,ref 0.90' count as the same reason."""
    return "".join(ch for ch in reason if not ch.isdigit())


def _reason_keys(reasons) -> set[str]:
    return {_reason_key(r) for r in reasons or []}


def _store_priors(session: Session, priors: pd.DataFrame, computed_at: datetime) -> None:
    session.execute(delete(FleetPrior))
    for kind, row in priors.iterrows():
        session.add(FleetPrior(kind=str(kind), computed_at=computed_at, detail=json_ready(row.to_dict())))
    session.flush()


def _rerank(session: Session) -> None:
    """Order the whole stored service list again (a partial refresh moves some pumps).

    Reads only the figures the order uses (status, hours to limit, and from each stored detail its margin past
    the limit, lower-bound date and pump name, extracted by the database) and writes only the ranks that moved.
    """
    detail = AnalysisResult.detail
    rows = session.execute(select(
        AnalysisResult.pump_id, AnalysisResult.rank, AnalysisResult.status, AnalysisResult.hours_to_limit,
        detail["past_margin"].as_float(), detail["limit_date_low"].as_string(), detail["pump"].as_string(),
    )).all()
    if not rows:
        return
    frame = pd.DataFrame(rows, columns=["pump_id", "rank", "status", "hours_to_limit", "past_margin",
                                        "limit_date_low", "pump"]).set_index("pump_id")
    frame["past_margin"] = frame["past_margin"].astype(float)
    frame["hours_to_limit"] = frame["hours_to_limit"].astype(float)
    frame["limit_date_low"] = pd.to_datetime(frame["limit_date_low"])
    ranks = service_rank(frame)
    moved = ranks[ranks != frame["rank"]]
    if len(moved):
        session.execute(update(AnalysisResult), [{"pump_id": int(pump_id), "rank": int(rank)}
                                                 for pump_id, rank in moved.items()])
    session.flush()


def analysis_records(session: Session, pump_ids=None) -> list[dict]:
    """Stored results, most urgent first, as JSON-ready dicts: the contract fields first, then the rest."""
    statement = select(AnalysisResult, Pump.serial).join(Pump, Pump.id == AnalysisResult.pump_id)
    if pump_ids is not None:
        statement = statement.where(AnalysisResult.pump_id.in_(list(pump_ids)))
    records = []
    for row, serial in session.execute(statement.order_by(AnalysisResult.rank, Pump.serial)):
        record = {"pump": serial}
        record.update({k: getattr(row, k) for k in _COLUMNS})
        record["rank"] = row.rank
        record["computed_at"] = row.computed_at.isoformat(timespec="seconds")
        record.update({k: v for k, v in (row.detail or {}).items() if k not in record})
        records.append(record)
    return records
