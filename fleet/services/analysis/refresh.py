"""Bring stored analyses up to date: after a write, on a page read, at start, or for a full `fleet analyze`.

The engine runs in a read transaction, and only storing takes the write lock (fleet.db.transaction), so a long
analysis never holds up a technician's save. Data written meanwhile is caught by the data versions: its pumps
stay stale and are analysed again in the next round.
"""

import time
from contextlib import closing
from datetime import datetime

from sqlalchemy import bindparam, func, or_, select
from sqlalchemy.orm import Session, sessionmaker

from fleet.db.models import AnalysisResult, Pump, PumpDataVersion
from fleet.db.transaction import run_write
from fleet.services.analysis.compute import Progress, compute
from fleet.services.analysis.spool import plan_fleet, spool_fleet, spool_folder, spool_parts
from fleet.services.analysis.store import RefreshSummary, store
from fleet.services.analysis.store_fleet import StoredParts, finish_fleet, store_part, store_spooled
from fleet.services.mail.send import deliver_due
from fleet.trend.settings import AnalysisSettings

# When at least this share of the fleet is stale, one full analysis is cheaper than pump by pump.
FULL_SHARE = 0.5
STORE_LOCK = "fleet analysis store"  # one store at a time (PostgreSQL; SQLite has one writer anyway)
AMONG_AT_MOST = 5000  # pumps looked up by id when a write names its pumps; more: one look over the fleet
ROUNDS = 4  # rounds of "analyse what is stale" before giving up to the next read (writers keep coming)


def _stale():
    version = func.coalesce(PumpDataVersion.version, 0)
    return (select(Pump.id).outerjoin(PumpDataVersion, PumpDataVersion.pump_id == Pump.id)
            .outerjoin(AnalysisResult, AnalysisResult.pump_id == Pump.id)
            .where(or_(AnalysisResult.pump_id.is_(None), AnalysisResult.data_version < version)))


_STALE_AMONG = _stale().where(Pump.id.in_(bindparam("ids", expanding=True)))  # built once: a write asks it each time


def stale_pumps(session: Session) -> set[int]:
    """Pumps whose stored analysis is missing or older than their data."""
    return set(session.scalars(_stale()))


# Four totals, each a count or a sum over one index: any_stale.
_TOTALS = select(select(func.count()).select_from(Pump).scalar_subquery(),
                 select(func.count()).select_from(AnalysisResult).scalar_subquery(),
                 select(func.coalesce(func.sum(PumpDataVersion.version), 0)).scalar_subquery(),
                 select(func.coalesce(func.sum(AnalysisResult.data_version), 0)).scalar_subquery())


def any_stale(session: Session) -> bool:
    """Whether some pump's stored analysis is missing or older than its data (stale_pumps names them), from four
    totals: asked before every page, where a look at every pump's rows took 13 ms at 10,000 pumps and 70 ms at
    50,000. Exact because a stored analysis never carries a version newer than its pump's: it carries the version
    read before its data (compute.data_versions), a pump's version only moves on (writes.policy), a pump without
    a version row is at 0, and both rows go with their pump. So every pump has its analysis exactly when the counts
    agree, and then each stored version equals its pump's exactly when the sums do. Totals that disagree any other
    way also answer True: stale_pumps then looks pump by pump."""
    pumps, analysed, versions, analysed_versions = session.execute(_TOTALS).one()
    return analysed != pumps or analysed_versions != versions


def refresh_analysis(session: Session, pump_ids=None, now: datetime | None = None,
                     settings: AnalysisSettings | None = None, progress: Progress | None = None) -> RefreshSummary:
    """Analyse ``pump_ids`` (None: the whole fleet) and store the results in the caller's transaction."""
    if pump_ids is None:  # part by part (fleet.services.analysis.spool)
        with spool_folder() as folder:
            return store_spooled(session, spool_fleet(session, folder, now, settings), settings, progress)
    computed = compute(session, pump_ids, now, settings)
    if progress:
        progress(0, len(computed.results), "storing analysis")
    summary = store(session, computed, settings)
    if progress:
        progress(len(computed.results), len(computed.results), "storing analysis")
    return summary


def reanalyse(sessions: sessionmaker[Session], pump_ids=None, now: datetime | None = None,
              settings: AnalysisSettings | None = None, progress: Progress | None = None,
              workers: int = 1) -> RefreshSummary:
    """Analyse ``pump_ids`` (None: the fleet) afresh, computing outside the write lock, then bring up to date
    anything written meanwhile. ``workers`` > 1 runs a full analysis's parts in that many processes
    (fleet.services.analysis.parallel): the read transaction here has written nothing, so they see what it sees
    or newer, and the data versions read first keep anything newer stale."""
    if pump_ids is None:
        summary = fleet_afresh(sessions, now, settings, progress, workers)
    else:
        with sessions() as session, session.begin():
            computed = compute(session, pump_ids, now, settings, workers=workers)
        if progress:
            progress(0, len(computed.results), "storing analysis")
        summary = run_write(sessions, lambda session: store(session, computed, settings), exclusive=STORE_LOCK)
        if progress:
            progress(len(computed.results), len(computed.results), "storing analysis")
    bring_up_to_date(sessions, now, settings)
    if summary.alerts:
        deliver_due(sessions)
    return summary


def fleet_afresh(sessions: sessionmaker[Session], now: datetime | None = None, settings: AnalysisSettings | None = None,
                 progress: Progress | None = None, workers: int = 1, marks: dict | None = None) -> RefreshSummary:
    """The whole fleet analysed part by part into files (fleet.services.analysis.spool), each part stored in a
    write of its own as soon as it is computed, then every kind's fleet life figures refitted and the service order
    checked in one more: no process holds the whole fleet's results, and no writer waits on more than one part.

    With ``workers`` > 1 the workers compute the next parts while this process stores the last, each in its own read
    transaction. Where this process runs no other thread (``fleet analyze``), its engine's connections are closed
    and the workers forked from it, so they start at once with the libraries it has imported
    (fleet.services.analysis.parallel). A web server's bring_up_to_date runs the parts in its own process (one
    worker) anyway. In this process alone (one worker, or a private database) the parts are computed in one read
    transaction first and stored after it. The data versions are read before any part: a write landing meanwhile
    leaves its pump stale, and a part never overwrites a newer stored analysis. A run cut short keeps the parts it
    stored, each whole; the rest keep their analysis until the next run. ``progress(pumps stored, pumps, label)``
    after each part; ``marks`` (for a benchmark), when given, gets the moment the last part was computed
    ("computed", time.perf_counter), the workers' peak memory ("worker_peaks_mb") and whether they were forked from
    this process ("forked").
    """
    settings = settings or AnalysisSettings()
    with spool_folder() as folder:
        with sessions() as session, session.begin():
            plan = plan_fleet(session, folder, now, settings, workers)
            engine = session.get_bind()
            computed = None if plan.url else list(spool_parts(session, plan, settings))
        fork = False
        if computed is None:
            from fleet.services.analysis.parallel import fork_ready

            fork = fork_ready()
            if fork:
                engine.dispose()  # no connection of this process is open when the workers are forked from it
        if computed is not None and marks is not None:
            marks["computed"] = time.perf_counter()
        parts = spool_parts(None, plan, settings, fork) if computed is None else (part for part in computed)
        stored = StoredParts()
        with closing(parts):  # a store failing stops the workers: the parts left are not wanted
            for number, part in enumerate(parts, start=1):
                if marks is not None and number == len(plan.paths):
                    marks.setdefault("computed", time.perf_counter())
                stored.add(run_write(sessions, lambda session, path=part.path: store_part(
                    session, path, plan.versions, plan.computed_at), exclusive=STORE_LOCK))
                if progress:
                    progress(stored.pumps, plan.pumps, "analysing and storing")
        if marks is not None:
            marks.setdefault("computed", time.perf_counter())  # a fleet without pumps
            marks["worker_peaks_mb"] = plan.worker_peaks_mb
            marks["forked"] = fork
        return run_write(sessions, lambda session: finish_fleet(session, stored, plan.computed_at, settings),
                         exclusive=STORE_LOCK)


def bring_up_to_date(sessions: sessionmaker[Session], now: datetime | None = None,
                     settings: AnalysisSettings | None = None, deliver: bool = True,
                     among: set[int] | None = None) -> RefreshSummary | None:
    """Analyse every stale pump (``among``: of these pumps only, as a write unit asks for the pumps it touched;
    any other stale pump is caught by the next read or start) and store it, then send the alerts the stores
    queued (after their commit, outside the lock: fleet.services.mail.send; ``deliver=False`` leaves that to the
    caller, as ``perform`` does); None when nothing was stale."""
    summary, alerts = None, 0
    if among is not None and len(among) > AMONG_AT_MOST:
        among = None  # one look over the fleet costs less than a list this long
    for _ in range(ROUNDS):
        with sessions() as session, session.begin():
            stale = _stale_among(session, among)
            if not stale:
                break
            full = len(stale) >= 2 and len(stale) >= FULL_SHARE * (session.scalar(select(func.count(Pump.id))) or 0)
            computed = None if full else compute(session, sorted(stale), now, settings)
        if full:
            summary = fleet_afresh(sessions, now, settings)
        else:
            summary = run_write(sessions, lambda session, c=computed: store(session, c, settings),
                                exclusive=STORE_LOCK)
        alerts += summary.alerts
    if alerts and deliver:
        deliver_due(sessions)
    return summary


def _stale_among(session: Session, among: set[int] | None) -> set[int]:
    if among is None:
        return stale_pumps(session) if any_stale(session) else set()
    if not among:
        return set()
    return set(session.scalars(_STALE_AMONG, {"ids": sorted(among)}))
