"""Keep an analysis: each pump's figures, its service lives, its kind's fleet life figures, and the service order.

Runs inside a write unit. A pump's figures are stored only when computed from data at least as new as those already
stored (a slow analysis never overwrites a newer one). The fleet life figures (the Weibull of each pump kind) are
refitted from the stored service lives whenever a stored pump of that kind changes what they are computed from (its
service lives, age or planning horizon), and each pump of the kind then gets its prior figures again: this needs
intervals, not readings, so it stays cheap. Each stored pump's forecast is also
kept in the forecast record when it moved (fleet.services.analysis.snapshots states the rule).
"""

from dataclasses import dataclass
from datetime import datetime

import numpy as np
import pandas as pd
from sqlalchemy import bindparam, delete, func, insert, select, update
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, FleetPrior, IntervalTrend, Pump, ServiceLife, StatusChange
from fleet.jsonvalues import json_ready
from fleet.services.analysis.compute import Computed, stored_priors
from fleet.services.analysis.snapshots import keep_forecasts
from fleet.services.mail.outbox import queue_alerts
from fleet.trend.engine import prior_figures, results_to_records
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import service_order_keys, service_rank
from fleet.trend.weibull import fit_fleet_priors

# The fields of the JSON contract (`fleet analyze --json`), each stored in its own column.
CONTRACT_FIELDS = (
    "pump", "status", "reasons", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit",
    "hours_to_limit_low", "hours_to_limit_high", "limit_date", "governing_limit", "prior_hours_to_overhaul",
    "energy_cost_per_year",
)
COLUMNS = CONTRACT_FIELDS[1:]  # 'pump' is the serial, kept on the pump row
# Further figures kept in their own columns: the service order's (also in detail), and the prior figures with
# what they are computed from (fleet.trend.engine.prior_figures; the prior columns only, since a refit of the
# kind rewrites them without touching detail).
ORDER_COLUMNS = ("past_margin", "limit_date_low")
PRIOR_COLUMNS = ("prior_b10_hours", "age_hours", "planning_horizon_hours")
NOT_IN_DETAIL = (*COLUMNS, "pump_id", "rank", "prior_b10_hours", "planning_horizon_hours")
# A stored prior figure is rewritten when a refit moves it by more than this (relative). Far inside the promise
# that stored figures match a full analysis to 1 part in 10,000, and compared with the stored value, so small
# moves never add up unseen.
PRIOR_TOLERANCE = 1e-6
_IN_CHUNK = 5000  # ids per IN (...) list
# Up to this many stored pumps are placed in the order one by one (place_in_order); more are re-ranked whole.
PLACED_ONE_BY_ONE = 50


@dataclass
class RefreshSummary:
    pumps: int
    by_status: dict[str, int]
    full: bool
    computed_at: datetime
    alerts: int = 0  # mails queued because a followed pump got worse (fleet.services.mail)

    def describe(self) -> str:
        scope = "fleet" if self.full else f"{self.pumps} pump(s)"
        counts = ", ".join(f"{n} {status.replace('_', ' ')}" for status, n in sorted(self.by_status.items()))
        return f"analysis refreshed for the {scope}: {counts or 'no pumps'}"


def _chunks(ids: list) -> list[list]:
    return [ids[i:i + _IN_CHUNK] for i in range(0, len(ids), _IN_CHUNK)] or [[]]


def store(session: Session, computed: Computed, settings: AnalysisSettings | None = None) -> RefreshSummary:
    """Store ``computed`` where it is not older than what is stored; refit the kinds whose fleet life figures it
    changes; place its pumps in the service order."""
    settings = settings or AnalysisSettings()
    results = computed.results
    ids = [int(p) for p in results.index]
    stored, basis_before, placed = {}, {}, {}
    for part in _chunks(ids):
        for pump_id, version, kind, age, horizon, rank, key in session.execute(
                select(AnalysisResult.pump_id, AnalysisResult.data_version, AnalysisResult.detail["kind"].as_string(),
                       AnalysisResult.age_hours, AnalysisResult.planning_horizon_hours, AnalysisResult.rank,
                       AnalysisResult.order_key)
                .where(AnalysisResult.pump_id.in_(part))):
            stored[pump_id], basis_before[pump_id], placed[pump_id] = version, (kind, age, horizon), (rank, key)
    existing = {p for part in _chunks(ids) for p in session.scalars(select(Pump.id).where(Pump.id.in_(part)))}
    keep = [p for p in ids if p in existing and computed.versions.get(p, 0) >= stored.get(p, -1)]
    kept = results.loc[keep]
    records = results_to_records(kept)
    lives = computed.lives[computed.lives["pump_id"].isin(keep)]
    kinds = _kinds_moved(session, records, lives, basis_before)
    kinds |= _with_stored_priors(session, records, kinds)
    changes = _record_changes(session, records, computed.computed_at)
    alerts = queue_alerts(session, changes)  # in this transaction: stored with the analysis they follow from
    for part in _chunks(keep):
        session.execute(delete(AnalysisResult).where(AnalysisResult.pump_id.in_(part)))
        session.execute(delete(ServiceLife).where(ServiceLife.pump_id.in_(part)))
        session.execute(delete(IntervalTrend).where(IntervalTrend.pump_id.in_(part)))
    _insert_results(session, records, computed, placed)
    _insert_trends(session, computed.trends[computed.trends["pump_id"].isin(keep)], computed.computed_at)
    keep_forecasts(session, records, computed.computed_at)
    if len(lives):
        session.execute(insert(ServiceLife), [
            {"pump_id": int(p), "interval_no": int(n), "entry_hours": float(e), "life_hours": float(h),
             "failed": bool(f)}
            for p, n, e, h, f in zip(lives["pump_id"], lives["interval_no"], lives["entry_hours"],
                                     lives["life_hours"], lives["failed"], strict=True)])
    if computed.full:
        kinds |= set(kept["kind"].dropna()) | set(session.scalars(select(FleetPrior.kind)))
    refit_kinds(session, kinds, computed.computed_at, settings)
    if computed.full or len(records) > PLACED_ONE_BY_ONE or not place_in_order(session, records):
        rerank(session)
    by_status = kept["status"].value_counts().to_dict()
    return RefreshSummary(len(records), {str(k): int(v) for k, v in by_status.items()}, computed.full,
                          computed.computed_at, alerts)


def _kinds_moved(session: Session, records: list[dict], lives: pd.DataFrame,
                 basis_before: dict[int, tuple]) -> set[str]:
    """The pump kinds whose fleet life figures the records change: those of a pump whose service lives, kind, age
    or planning horizon differ from what is stored (before and after, when its kind changed). A kind's Weibull
    is fitted from its service lives and its expected overhauls summed from its pumps' ages and horizons, so
    with none of these changed its stored figures, and its pumps' prior figures, stay exact as they are."""
    ids = [record["pump_id"] for record in records]
    stored_lives: dict[int, list] = {}
    for part in _chunks(ids):
        for row in session.execute(select(ServiceLife.pump_id, ServiceLife.interval_no, ServiceLife.entry_hours,
                                          ServiceLife.life_hours, ServiceLife.failed)
                                   .where(ServiceLife.pump_id.in_(part)).order_by(ServiceLife.interval_no)):
            stored_lives.setdefault(row[0], []).append(tuple(row))
    new_lives: dict[int, list] = {}
    for row in sorted(zip(lives["pump_id"], lives["interval_no"], lives["entry_hours"], lives["life_hours"],
                          lives["failed"], strict=True), key=lambda r: r[1]):
        new_lives.setdefault(int(row[0]), []).append((int(row[0]), int(row[1]), float(row[2]), float(row[3]),
                                                     bool(row[4])))
    kinds = set()
    for record in records:
        pump_id = record["pump_id"]
        before = basis_before.get(pump_id)
        after = (record.get("kind"), record.get("age_hours"), record.get("planning_horizon_hours"))
        if before != after or stored_lives.get(pump_id, []) != new_lives.get(pump_id, []):
            kinds |= {k for k in (before[0] if before else None, after[0]) if k}
    return kinds


def _with_stored_priors(session: Session, records: list[dict], refitted: set[str]) -> set[str]:
    """Give the records of kinds not refitted their prior figures from their kind's stored fleet life figures as
    they are now, under the store's lock: the engine read them earlier, and another store may have refitted the
    kind since. Returns the kinds that have no stored figures yet (to be fitted)."""
    rest = [r for r in records if r.get("kind") and r["kind"] not in refitted]
    if not rest:
        return set()
    priors = stored_priors(session)
    known = set() if priors is None else set(priors.index)
    missing = {r["kind"] for r in rest if r["kind"] not in known}
    rest = [r for r in rest if r["kind"] in known]
    if rest:
        def number(value):
            return np.nan if value is None else float(value)

        hours, b10, _ = prior_figures([r["kind"] for r in rest], [number(r.get("age_hours")) for r in rest],
                                      [number(r.get("planning_horizon_hours")) for r in rest], priors)
        for record, h, b in zip(rest, hours, b10, strict=True):
            record["prior_hours_to_overhaul"], record["prior_b10_hours"] = json_ready(h), json_ready(b)
    return missing


def _insert_results(session: Session, records: list[dict], computed: Computed,
                    placed: dict[int, tuple[int, bytes | None]]) -> None:
    """Insert the records; each keeps its pump's former place in the order (rank and key) until placed anew
    (a pump new to the list: rank 0, no key)."""
    rows = []
    for record in records:
        detail = {k: v for k, v in record.items() if k not in NOT_IN_DETAIL}
        rank, key = placed.get(record["pump_id"], (0, None))
        rows.append({
            "pump_id": record["pump_id"], "computed_at": computed.computed_at, "rank": rank, "order_key": key,
            "detail": json_ready(detail), "data_version": computed.versions.get(record["pump_id"], 0),
            **{k: record.get(k) for k in (*COLUMNS, *ORDER_COLUMNS, *PRIOR_COLUMNS)},
        })
    if rows:
        session.execute(insert(AnalysisResult), rows)


def _insert_trends(session: Session, trends: pd.DataFrame, computed_at: datetime) -> None:
    if len(trends):
        session.execute(insert(IntervalTrend), [
            {"pump_id": int(p), "interval_no": int(n), "computed_at": computed_at, "is_current": bool(c),
             "start_hours": json_ready(s), "current_hours": json_ready(h), "enough_data": bool(e), "fit": fit}
            for p, n, c, s, h, e, fit in zip(trends["pump_id"], trends["interval_no"], trends["is_current"],
                                              trends["start_hours"], trends["current_hours"], trends["enough_data"],
                                              trends["fit"], strict=True)])


def _record_changes(session: Session, records: list[dict], computed_at: datetime) -> list[StatusChange]:
    """Append a StatusChange for every pump whose status or reasons differ from its stored analysis; returns
    them."""
    ids = [record["pump_id"] for record in records]
    previous = {}
    for part in _chunks(ids):
        statement = select(AnalysisResult.pump_id, AnalysisResult.status, AnalysisResult.reasons)
        previous.update({p: (s, r) for p, s, r in session.execute(statement.where(AnalysisResult.pump_id.in_(part)))})
    added = []
    for record in records:
        before_status, before_reasons = previous.get(record["pump_id"], (None, []))
        reasons = record.get("reasons") or []
        if record["status"] == before_status and _reason_keys(reasons) == _reason_keys(before_reasons):
            continue
        known = _reason_keys(before_reasons)
        added.append(StatusChange(
            pump_id=record["pump_id"], at=computed_at, status=record["status"], previous_status=before_status,
            reasons=reasons, new_reasons=[r for r in reasons if _reason_key(r) not in known],
            eta_v_ref=record.get("eta_v_ref"), hours_to_limit=record.get("hours_to_limit"),
            limit_date=record.get("limit_date"),
        ))
    session.add_all(added)
    session.flush()
    return added


def _reason_key(reason: str) -> str:
    """A reason without its figures, so 'eta_v,ref 0.91' and 'eta_v,ref 0.90' count as the same reason."""
    if reason.isascii():  # the digits of ASCII text are 0-9: one C-level pass (a full analysis asks this 20,000 times)
        return reason.translate(_ASCII_DIGITS)
    return "".join(ch for ch in reason if not ch.isdigit())


_ASCII_DIGITS = str.maketrans("", "", "0123456789")


def _reason_keys(reasons) -> set[str]:
    return {_reason_key(r) for r in reasons or []}


def refit_kinds(session: Session, kinds, now: datetime, settings: AnalysisSettings) -> None:
    """Fit the fleet life figures of ``kinds`` again from the stored service lives, store them, and give every
    stored analysis of those kinds its prior figures from them.

    Reads plain columns only (the service lives, and each stored pump's age and planning horizon in running
    hours) and rewrites the two prior columns of the pumps whose figures moved: no JSON read or written.
    """
    kinds = sorted(k for k in kinds if k)
    if not kinds:
        return
    kind_of = pd.Series(dict(_plain_rows(session, select(Pump.id, Pump.kind).where(Pump.kind.in_(kinds)))),
                        dtype=object)
    lives = pd.DataFrame(_plain_rows(session, select(
        ServiceLife.pump_id, ServiceLife.entry_hours, ServiceLife.life_hours, ServiceLife.failed)
        .join(Pump, Pump.id == ServiceLife.pump_id).where(Pump.kind.in_(kinds))),
        columns=["pump_id", "entry_hours", "life_hours", "failed"]).astype(
        {"entry_hours": float, "life_hours": float, "failed": bool})
    priors = fit_fleet_priors(lives, kind_of, settings.min_weibull_failures)
    result = AnalysisResult.__table__
    stored = _plain_rows(session, select(
        result.c.pump_id, Pump.kind, result.c.age_hours, result.c.planning_horizon_hours,
        result.c.prior_hours_to_overhaul, result.c.prior_b10_hours)
        .join(Pump, Pump.id == result.c.pump_id).where(Pump.kind.in_(kinds)))
    if stored:
        ids, kind, age, horizon, old_hours, old_b10 = (np.array(c, dtype=object) for c in zip(*stored, strict=True))
        hours, b10, priors = prior_figures(kind, age.astype(float), horizon.astype(float), priors)
        moved = _moved(hours, old_hours.astype(float)) | _moved(b10, old_b10.astype(float))
        if moved.any():
            session.execute(result.update().where(result.c.pump_id == bindparam("id")).values(
                prior_hours_to_overhaul=bindparam("hours"), prior_b10_hours=bindparam("b10")), [
                {"id": int(p), "hours": json_ready(h), "b10": json_ready(b)}
                for p, h, b in zip(ids[moved], hours[moved], b10[moved], strict=True)])
    else:
        priors["expected_overhauls_in_horizon"] = np.nan
    session.execute(delete(FleetPrior).where(FleetPrior.kind.in_(kinds)))
    if len(priors):
        session.execute(insert(FleetPrior), [
            {"kind": str(kind), "computed_at": now, "detail": json_ready(row.to_dict())}
            for kind, row in priors.iterrows()])
    session.flush()


def _plain_rows(session: Session, statement) -> list[tuple]:
    """The driver's rows of ``statement`` as plain tuples (no per-row Row or type processing: numbers only)."""
    result = session.connection().execute(statement)
    try:
        return result.cursor.fetchall() if result.cursor is not None else []
    finally:
        result.close()


def _moved(new: np.ndarray, old: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        relative = np.abs(new - old) / np.maximum(np.abs(old), 1e-9)
    return (np.isnan(new) != np.isnan(old)) | np.nan_to_num(relative > PRIOR_TOLERANCE, nan=False).astype(bool)


def rerank(session: Session) -> None:
    """Order the whole stored service list again, and key every row (fleet.trend.status.service_order_keys).

    Reads only the figures the order uses (status, hours to limit, margin past the limit, lower-bound date, all
    plain columns, and the pump's serial) and writes only the ranks and keys that moved.
    """
    rows = session.execute(select(
        AnalysisResult.pump_id, AnalysisResult.rank, AnalysisResult.order_key, AnalysisResult.status,
        AnalysisResult.hours_to_limit, AnalysisResult.past_margin, AnalysisResult.limit_date_low, Pump.serial,
    ).join(Pump, Pump.id == AnalysisResult.pump_id)).all()
    if not rows:
        return
    frame = pd.DataFrame(rows, columns=["pump_id", "rank", "order_key", "status", "hours_to_limit", "past_margin",
                                        "limit_date_low", "pump"]).set_index("pump_id")
    frame["past_margin"] = frame["past_margin"].astype(float)
    frame["hours_to_limit"] = frame["hours_to_limit"].astype(float)
    keys = service_order_keys(frame)
    ranks = service_rank(frame).to_numpy()
    moved = (ranks != frame["rank"].to_numpy()) | (keys != frame["order_key"].to_numpy())
    if moved.any():
        session.execute(update(AnalysisResult), [
            {"pump_id": int(pump_id), "rank": int(rank), "order_key": key}
            for pump_id, rank, key in zip(frame.index[moved], ranks[moved], keys[moved], strict=True)])
    session.flush()


def place_in_order(session: Session, records: list[dict]) -> bool:
    """Give each newly stored pump its rank and key among the stored list, without reading the list: a pump's new
    rank is one more than the number of smaller keys (an indexed count), and only the ranks between its old place
    and its new one shift by one. False, with nothing changed, when the stored list is not a whole ranking
    1..N with a key on every row (rows from before keys existed, or a pump deleted since, leave a row without a
    key or a gap in the ranks), so the caller re-ranks it whole. Every store leaves the list whole.
    """
    result = AnalysisResult.__table__
    new = [record["pump_id"] for record in records]
    # Each check reads an index only (the list's rows carry their whole analysis: a scan would read it all).
    unkeyed = set(session.scalars(select(result.c.pump_id).where(result.c.order_key.is_(None)).limit(len(new) + 1)))
    if not unkeyed <= set(new):
        return False
    ranked = result.c.rank > 0  # a pump new to the list waits at rank 0 (_insert_results)
    rows, distinct, lowest, top = session.execute(select(
        func.count(), func.count(result.c.rank.distinct()), func.min(result.c.rank), func.max(result.c.rank))
        .where(ranked)).one()
    if not rows == distinct == (top or 0) or lowest not in (None, 1) or \
            session.scalar(select(func.count()).select_from(result).where(~ranked)) != len(unkeyed):
        return False
    keys = service_order_keys(pd.DataFrame(records))
    for pump_id, key in zip(new, keys, strict=True):
        old = session.scalar(select(result.c.rank).where(result.c.pump_id == pump_id)
                             .where(result.c.order_key.is_not(None)))
        rank = 1 + session.scalar(select(func.count()).select_from(result)
                                  .where(result.c.order_key < key, result.c.pump_id != pump_id))
        if old is None:  # new to the list: everything from its place on moves down one
            shift = (result.c.rank >= rank, 1)
        elif rank < old:
            shift = ((result.c.rank >= rank) & (result.c.rank < old), 1)
        else:
            shift = ((result.c.rank > old) & (result.c.rank <= rank), -1)
        if old != rank:
            session.execute(result.update().where(shift[0], result.c.pump_id != pump_id)
                            .values(rank=result.c.rank + shift[1]))
        session.execute(result.update().where(result.c.pump_id == pump_id).values(rank=rank, order_key=key))
    return True
