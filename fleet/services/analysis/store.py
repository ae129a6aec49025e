"""Keep an analysis: each pump's figures, its service lives, its kind's fleet life figures, and its service order key.

Runs inside a write unit. A pump's figures are stored only when computed from data at least as new as those already
stored (a slow analysis never overwrites a newer one). A store writes its own pumps' rows and nothing else of the
list: the rank shown and each pump's prior figures are derived when read (fleet.services.analysis.read_figures)
from the order keys and the kinds' stored fleet life figures. A kind's Weibull is refitted from the stored service
lives when a completed interval changes, and when the running intervals that grew since its fit (each reading
lengthens one) moved it past a bound far inside the stored figures' promise; until then its expected overhauls in
the horizon are moved by each changed pump's share (_defer_or_refit). Either way one fleet_prior row is
rewritten, no pump's row. Each stored pump's forecast is also kept
in the forecast record when it moved (fleet.services.analysis.snapshots states the rule).
"""

from collections import Counter
from dataclasses import dataclass
from datetime import datetime

import numpy as np
import pandas as pd
from sqlalchemy import bindparam, delete, insert, select, update
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, FleetPrior, IntervalTrend, Pump, ServiceLife, StatusChange
from fleet.jsonvalues import json_ready
from fleet.services.analysis.compute import Computed
from fleet.services.analysis.snapshots import keep_forecasts
from fleet.services.mail.outbox import queue_alerts
from fleet.trend.engine import results_to_records
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import service_order_keys
from fleet.trend.weibull import conditional_failure_probability, expected_overhauls, fit_kind_priors

# The fields of the JSON contract (`fleet analyze --json`).
CONTRACT_FIELDS = (
    "pump", "status", "reasons", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit",
    "hours_to_limit_low", "hours_to_limit_high", "limit_date", "governing_limit", "prior_hours_to_overhaul",
    "energy_cost_per_year",
)
# The prior figures: derived when read (fleet.services.analysis.read_figures), neither a column nor in detail.
DERIVED = ("prior_hours_to_overhaul", "prior_b10_hours")
# The contract's fields kept in their own columns ('pump' is the serial, kept on the pump row).
COLUMNS = tuple(f for f in CONTRACT_FIELDS[1:] if f not in DERIVED)
# Further figures kept in their own columns: the service order's (also in detail), and what the prior figures are
# computed from (fleet.trend.engine.prior_figures).
ORDER_COLUMNS = ("past_margin", "limit_date_low")
ORDER_FIELDS = ("pump", "status", "hours_to_limit", *ORDER_COLUMNS)  # what fleet.trend.status.service_order_keys reads
PRIOR_COLUMNS = ("age_hours", "planning_horizon_hours")
NOT_IN_DETAIL = (*COLUMNS, *DERIVED, "pump_id", "rank", "planning_horizon_hours")
_IN_CHUNK = 5000  # ids per IN (...) list
# A kind's Weibull is refitted once the running intervals that grew since its fit moved more than this share of
# its exposure (_defer_or_refit). Its figures then move by a few times this at most (measured on one of the
# benchmark's 2,000-pump kinds: beta, alpha, B10 and the mean residual life moved 0.3 to 2.5 times the share;
# tests/test_store_fit_deferred.py bounds it at 5 times), inside the promise that stored figures match a full
# analysis to 1 part in 10,000 (tests/test_write_invariant.py). At 1e-6 a round's reading (a few days' hours on one
# of 2,000 pumps) passed the bound in most posts, and the refit (about 20 ms) then cost as much as half the rest.
FIT_DRIFT = 1e-5
FIT_DRIFT_FIELD = "exposure_moved_since_fit"


# The statements a write's store runs, built once: building one (its clauses, then its cache key) costs several
# times what running it costs for a pump or two. Lists of ids go in as expanding parameters.
_IDS = bindparam("ids", expanding=True)
_STORED_OF = (select(Pump.id, AnalysisResult.data_version, AnalysisResult.detail["kind"].as_string(),
                     AnalysisResult.age_hours, AnalysisResult.planning_horizon_hours, AnalysisResult.status,
                     AnalysisResult.reasons)
              .outerjoin(AnalysisResult, AnalysisResult.pump_id == Pump.id).where(Pump.id.in_(_IDS)))
_KINDS_FITTED = select(FleetPrior.kind)
_PRIORS_OF = select(FleetPrior.kind, FleetPrior.detail).where(FleetPrior.kind.in_(bindparam("kinds", expanding=True)))
_LIVES_OF = (select(ServiceLife.pump_id, ServiceLife.interval_no, ServiceLife.entry_hours, ServiceLife.life_hours,
                    ServiceLife.failed).where(ServiceLife.pump_id.in_(_IDS)).order_by(ServiceLife.interval_no))
_DELETE_RESULTS = delete(AnalysisResult).where(AnalysisResult.pump_id.in_(_IDS))
_DELETE_TRENDS = delete(IntervalTrend).where(IntervalTrend.pump_id.in_(_IDS))
_DELETE_LIVES = delete(ServiceLife).where(ServiceLife.pump_id.in_(_IDS))
_ANY_UNKEYED = select(AnalysisResult.pump_id).where(AnalysisResult.order_key.is_(None)).limit(1)


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


@dataclass
class _Stored:
    """What is stored of one pump's analysis before this store: what its kind's figures read, and its status."""
    version: int
    basis: tuple  # (kind, age_hours, planning_horizon_hours)
    status: str | None
    reasons: list


def _chunks(ids: list) -> list[list]:
    return [ids[i:i + _IN_CHUNK] for i in range(0, len(ids), _IN_CHUNK)] or [[]]


def store(session: Session, computed: Computed, settings: AnalysisSettings | None = None) -> RefreshSummary:
    """Store ``computed`` where it is not older than what is stored; bring the fleet life figures of the kinds
    it changes up to date; key its pumps' places in the service order."""
    settings = settings or AnalysisSettings()
    results = computed.results
    ids = [int(p) for p in results.index]
    existing, before = set(), {}
    for part in _chunks(ids):  # one read: which pumps still exist, and what is stored of them
        for pump_id, version, kind, age, horizon, status, reasons in session.execute(_STORED_OF, {"ids": part}):
            existing.add(pump_id)
            if version is not None:
                before[pump_id] = _Stored(version, (kind, age, horizon), status, reasons)
    keep = [p for p in ids if p in existing and computed.versions.get(p, 0) >= getattr(before.get(p), "version", -1)]
    whole = len(keep) == len(ids)  # every pump kept (the usual case): the frames as they are, no masks copying them
    kept = results if whole else results.loc[keep]
    records = results_to_records(kept)
    lives = computed.lives if whole else computed.lives[computed.lives["pump_id"].isin(keep)]
    kind_changes = _kind_changes(session, records, lives, before)
    refit, lives_moved = kind_changes.refit, kind_changes.lives_moved
    known = set(session.scalars(_KINDS_FITTED))
    refit |= {r["kind"] for r in records if r.get("kind") and r["kind"] not in known}  # none stored yet
    if computed.full:
        refit |= set(kept["kind"].dropna()) | known
    changes = _record_changes(session, records, computed.computed_at,
                              {p: (s.status, s.reasons) for p, s in before.items()})
    alerts = queue_alerts(session, changes)  # in this transaction: stored with the analysis they follow from
    for part in _chunks(keep):
        session.execute(_DELETE_RESULTS, {"ids": part})
        session.execute(_DELETE_TRENDS, {"ids": part})
    for part in _chunks(sorted(lives_moved)):
        session.execute(_DELETE_LIVES, {"ids": part})
    _insert_results(session, records, computed)
    _insert_trends(session, computed.trends if whole else computed.trends[computed.trends["pump_id"].isin(keep)],
                   computed.computed_at)
    keep_forecasts(session, records, computed.computed_at)
    moved_lives = lives[lives["pump_id"].isin(lives_moved)]
    if len(moved_lives):
        session.execute(insert(ServiceLife.__table__), [
            {"pump_id": int(p), "interval_no": int(n), "entry_hours": float(e), "life_hours": float(h),
             "failed": bool(f)}
            for p, n, e, h, f in zip(moved_lives["pump_id"], moved_lives["interval_no"], moved_lives["entry_hours"],
                                     moved_lives["life_hours"], moved_lives["failed"], strict=True)])
    refit |= _defer_or_refit(session, kind_changes)
    refit_kinds(session, refit, computed.computed_at, settings)
    if computed.full or session.scalar(_ANY_UNKEYED) is not None:
        rerank(session)  # rows stored before keys existed (an indexed look-up finds none once keyed)
    by_status = Counter(str(record["status"]) for record in records if record.get("status") is not None)
    return RefreshSummary(len(records), dict(by_status), computed.full, computed.computed_at, alerts)


@dataclass
class _KindChanges:
    """What the records change of the pump kinds' fleet life figures."""
    refit: set  # kinds whose completed intervals or membership changed: refitted now
    lives_moved: set  # pumps whose stored service lives differ from their new ones
    grown: list  # (kind, running interval's life before, after) of pumps where only that life grew or shrank
    shares: list  # (kind, stored basis or None, age_hours, planning horizon hours) of the other pumps of a kind


def _kind_changes(session: Session, records: list[dict], lives: pd.DataFrame,
                  before: dict[int, _Stored]) -> _KindChanges:
    """Sort the records' changes to their kinds' fleet life figures. A kind's Weibull is fitted from its pumps'
    service lives: a completed interval added, removed or changed, or a pump changing kind or new to the list,
    refits it (both kinds, before and after). The running interval is a suspension as long as the pump's age, so
    it grows with every reading: those moves, and ages and horizons (the kind's expected overhauls sum over
    them), are sorted out for _defer_or_refit."""
    ids = [record["pump_id"] for record in records]
    stored_lives: dict[int, list] = {}
    for part in _chunks(ids):
        for row in session.execute(_LIVES_OF, {"ids": part}):
            stored_lives.setdefault(row[0], []).append(tuple(row))
    new_lives: dict[int, list] = {}
    for row in sorted(zip(lives["pump_id"], lives["interval_no"], lives["entry_hours"], lives["life_hours"],
                          lives["failed"], strict=True), key=lambda r: r[1]):
        new_lives.setdefault(int(row[0]), []).append((int(row[0]), int(row[1]), float(row[2]), float(row[3]),
                                                     bool(row[4])))
    changes = _KindChanges(set(), set(), [], [])
    for record in records:
        pump_id, kind = record["pump_id"], record.get("kind")
        old, new = stored_lives.get(pump_id, []), new_lives.get(pump_id, [])
        stored = before.get(pump_id)
        kind_before = stored.basis[0] if stored else None
        if old != new:
            changes.lives_moved.add(pump_id)
        if stored is None or kind_before != kind or (old != new and not _only_running_moved(old, new)):
            changes.refit |= {k for k in (kind_before, kind) if k}
            continue
        if old != new:
            changes.grown.append((kind, old[-1][3], new[-1][3]))
        if stored.basis != (kind, record.get("age_hours"), record.get("planning_horizon_hours")):
            changes.shares.append((kind, stored.basis, record.get("age_hours"), record.get("planning_horizon_hours")))
    return changes


def _only_running_moved(old: list, new: list) -> bool:
    """Whether two lists of a pump's lives (pump, interval, entry, life, failed; by interval) differ only in the
    life of the running interval (the last, not failed): the same intervals, entries and completed lives."""
    return (len(old) == len(new) > 0 and old[:-1] == new[:-1] and not old[-1][4] and not new[-1][4]
            and old[-1][:3] == new[-1][:3])


def _defer_or_refit(session: Session, changes: _KindChanges) -> set[str]:
    """Bring the fitted kinds not refitted anyway up to date cheaply, or name them for a refit.

    A running interval that grew moves its kind's maximum-likelihood fit a little: the moved share of the fit's
    exposure (sum of (t/alpha)^beta - (t0/alpha)^beta over the lives, which the fit makes equal to its number of
    failures) is accumulated in the kind's detail, and the kind is refitted once it passes FIT_DRIFT. Meanwhile
    its expected overhauls in the horizon take each changed pump's new share less its old one, in one update of
    the kind's row. A kind without a fit has nothing that moves with a running interval or an age. Returns the
    kinds to refit (drift past the bound, or an unknown age or sum)."""
    kinds = {kind for kind, *_ in changes.grown + changes.shares} - changes.refit
    if not kinds:
        return set()
    details = dict(session.execute(_PRIORS_OF, {"kinds": sorted(kinds)}).all())
    refit = set()
    for kind in sorted(kinds):
        detail = details.get(kind) or {}
        beta, alpha, failures = detail.get("beta"), detail.get("alpha"), detail.get("n_failures")
        if beta is None or alpha is None or not failures:
            continue
        grown = np.array([(b, a) for k, b, a in changes.grown if k == kind], dtype=float).reshape(-1, 2)
        drift = (detail.get(FIT_DRIFT_FIELD) or 0.0) + float(
            np.abs((grown[:, 1] / alpha) ** beta - (grown[:, 0] / alpha) ** beta).sum()) / failures
        shares = [(s, age, horizon) for k, s, age, horizon in changes.shares if k == kind]
        step = float(np.sum(conditional_failure_probability(_floats([a for _, a, _ in shares]),
                                                             _floats([h for *_, h in shares]), beta, alpha)
                            - conditional_failure_probability(_floats([s[1] for s, *_ in shares]),
                                                              _floats([s[2] for s, *_ in shares]), beta, alpha)))
        expected = detail.get("expected_overhauls_in_horizon")
        if drift > FIT_DRIFT or expected is None or not np.isfinite(step):
            refit.add(kind)
            continue
        session.execute(update(FleetPrior).where(FleetPrior.kind == kind).values(
            detail={**detail, FIT_DRIFT_FIELD: drift, "expected_overhauls_in_horizon": expected + step}))
    return refit


def _floats(values) -> np.ndarray:
    return np.array([np.nan if v is None else float(v) for v in values], dtype=float)


def _insert_results(session: Session, records: list[dict], computed: Computed) -> None:
    """Insert the records, each with its place in the service order (fleet.trend.status.service_order_keys)."""
    if not records:
        return
    keys = order_keys(records)
    rows = []
    for record, key in zip(records, keys, strict=True):
        detail = {k: v for k, v in record.items() if k not in NOT_IN_DETAIL}
        rows.append({
            "pump_id": record["pump_id"], "computed_at": computed.computed_at, "order_key": key,
            "detail": json_ready(detail), "data_version": computed.versions.get(record["pump_id"], 0),
            **{k: record.get(k) for k in (*COLUMNS, *ORDER_COLUMNS, *PRIOR_COLUMNS)},
        })
    session.execute(insert(AnalysisResult.__table__), rows)


def order_keys(records: list[dict]) -> np.ndarray:
    """The records' service order keys, from the few fields the order reads (a frame of every field costs more
    than the keys)."""
    text = {"pump", "status", "limit_date_low"}
    # Each field as the array a frame of the records would hold (floats; text with NaN where it is missing), without
    # the frame: for a write's pump or two, the frame's own machinery costs more than the keys.
    return service_order_keys({
        name: np.array([np.nan if record.get(name) is None else record[name] for record in records],
                       dtype=object if name in text else float)
        for name in ORDER_FIELDS})


def _insert_trends(session: Session, trends: pd.DataFrame, computed_at: datetime) -> None:
    if len(trends):
        session.execute(insert(IntervalTrend.__table__), [
            {"pump_id": int(p), "interval_no": int(n), "computed_at": computed_at, "is_current": bool(c),
             "start_hours": json_ready(s), "current_hours": json_ready(h), "enough_data": bool(e), "fit": fit}
            for p, n, c, s, h, e, fit in zip(trends["pump_id"], trends["interval_no"], trends["is_current"],
                                              trends["start_hours"], trends["current_hours"], trends["enough_data"],
                                              trends["fit"], strict=True)])


def _record_changes(session: Session, records: list[dict], computed_at: datetime,
                    previous: dict[int, tuple] | None = None) -> list[StatusChange]:
    """Append a StatusChange for every pump whose status or reasons differ from its stored analysis
    (``previous``: pump id -> (status, reasons) stored, when the caller read them already); returns them."""
    if previous is None:
        previous = {}
        for part in _chunks([record["pump_id"] for record in records]):
            statement = select(AnalysisResult.pump_id, AnalysisResult.status, AnalysisResult.reasons)
            previous.update({p: (s, r) for p, s, r in
                             session.execute(statement.where(AnalysisResult.pump_id.in_(part)))})
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
    """Fit the fleet life figures of ``kinds`` again from the stored service lives, with their expected overhauls
    in the horizon summed over their stored pumps' ages and horizons, and store them.

    Reads plain columns only (the service lives, and each stored pump's age and planning horizon in running
    hours) and writes the kinds' fleet_prior rows only: each pump's prior figures follow from them when read.
    """
    kinds = sorted(k for k in kinds if k)
    if not kinds:
        return
    result = AnalysisResult.__table__
    # Every pump of the kinds, with its stored age and horizon where it has a stored analysis: one pass over the
    # pumps gives the kinds that have pumps (each gets a row) and what the expected overhauls sum over.
    pumps = _plain_rows(session, select(Pump.id, Pump.kind, result.c.pump_id, result.c.age_hours,
                                        result.c.planning_horizon_hours)
                        .outerjoin(result, result.c.pump_id == Pump.id).where(Pump.kind.in_(kinds)))
    # Sorted here, by pump and interval (a pump's intervals are unique), rather than by the query (which would scan
    # the tables in that order): a fixed order gives the same sums, so the same fit, however the rows lie on disk.
    rows = _plain_rows(session, select(
        ServiceLife.pump_id, ServiceLife.interval_no, Pump.kind, ServiceLife.entry_hours, ServiceLife.life_hours,
        ServiceLife.failed).join(Pump, Pump.id == ServiceLife.pump_id).where(Pump.kind.in_(kinds)))
    pump_id, interval_no, life_kind, entry, life, failed = (
        (list(c) for c in zip(*rows, strict=True)) if rows else ([],) * 6)
    order = np.lexsort((np.array(interval_no, dtype=np.int64), np.array(pump_id, dtype=np.int64)))
    priors = fit_kind_priors(sorted({row[1] for row in pumps}), np.array(life_kind, dtype=object)[order],
                             np.array(entry, dtype=float)[order], np.array(life, dtype=float)[order],
                             np.array(failed, dtype=bool)[order], settings.min_weibull_failures)
    ids, kind, result_id, age, horizon = (np.array(c, dtype=object) for c in zip(*pumps, strict=True)) if pumps else (
        np.array([], dtype=object),) * 5
    stored = np.flatnonzero(result_id != None)  # noqa: E711 (elementwise: the pumps with a stored analysis)
    if stored.size:
        stored = stored[np.argsort(ids[stored].astype(np.int64), kind="stable")]  # by pump, as the fit's lives
        # The expected overhauls as fleet.trend.engine.prior_figures sums them (its per-pump figures unused here).
        expected = expected_overhauls(age[stored].astype(float), horizon[stored].astype(float), kind[stored], priors)
        priors["expected_overhauls_in_horizon"] = expected.reindex(priors.index)
    else:
        priors["expected_overhauls_in_horizon"] = np.nan
    session.execute(delete(FleetPrior).where(FleetPrior.kind.in_(kinds)))
    if len(priors):
        session.execute(insert(FleetPrior.__table__), [
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


def rerank(session: Session) -> None:
    """Key every stored row of the service list again (fleet.trend.status.service_order_keys): after a full
    analysis, or when rows stored before keys existed have none.

    Reads only the figures the order uses (status, hours to limit, margin past the limit, lower-bound date, all
    plain columns, and the pump's serial) and writes only the keys that moved.
    """
    rows = session.execute(select(
        AnalysisResult.pump_id, AnalysisResult.order_key, AnalysisResult.status, AnalysisResult.hours_to_limit,
        AnalysisResult.past_margin, AnalysisResult.limit_date_low, Pump.serial,
    ).join(Pump, Pump.id == AnalysisResult.pump_id)).all()
    if not rows:
        return
    frame = pd.DataFrame(rows, columns=["pump_id", "order_key", "status", "hours_to_limit", "past_margin",
                                        "limit_date_low", "pump"]).set_index("pump_id")
    frame["past_margin"] = frame["past_margin"].astype(float)
    frame["hours_to_limit"] = frame["hours_to_limit"].astype(float)
    keys = service_order_keys(frame)
    moved = keys != frame["order_key"].to_numpy()
    if moved.any():
        session.execute(update(AnalysisResult), [
            {"pump_id": int(pump_id), "order_key": key}
            for pump_id, key in zip(frame.index[moved], keys[moved], strict=True)])
    session.flush()
