"""Run the trend engine on stored data: read only, nothing stored here (fleet.services.analysis.store does that)."""

from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime

import numpy as np
import pandas as pd
from sqlalchemy import bindparam, select
from sqlalchemy.orm import Session

from fleet.db.models import FleetPrior, Pump, PumpDataVersion
from fleet.services.analysis.frames import FleetFrames, load_frames, load_samples
from fleet.timeutil import utcnow
from fleet.trend.engine import FleetAnalysis, analyze_fleet, apply_priors, fit_priors
from fleet.trend.interval_trends import interval_trends
from fleet.trend.intervals import interval_lives
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import service_rank

Progress = Callable[[int, int, str], None]
CHUNK_PUMPS = 400  # pumps analysed at once in a full refresh: bounds its memory (measured in benchmarks/run.py)


def part_ids(ids: list[int], chunk_pumps: int, workers: int = 1) -> list[list[int]]:
    """``ids`` cut in order into parts of at most ``chunk_pumps``, their sizes as even as can be (they differ by one
    at most), and with ``workers`` > 1 as many parts as a multiple of ``workers``: the workers then run out of parts
    together, where 25 parts of 400 left one worker alone with the last part while the other core stood idle."""
    if not ids:
        return []
    count = -(-len(ids) // chunk_pumps)
    if workers > 1 and count > 1:
        count = min(-(-count // workers) * workers, len(ids))
    return [ids[n * len(ids) // count:(n + 1) * len(ids) // count] for n in range(count)]


@dataclass
class Computed:
    """An analysis ready to store: one row per pump, the service lives behind the fleet life figures, and the
    data version of each pump it was computed from (read before the data, so never newer than what it saw)."""

    results: pd.DataFrame
    lives: pd.DataFrame
    trends: pd.DataFrame  # each pump interval's fitted trend (fleet.trend.interval_trends)
    versions: dict[int, int]
    computed_at: datetime
    full: bool
    worker_peaks_mb: dict[int, float] = field(default_factory=dict)  # worker process id -> its peak memory


# Built once: building a statement costs more than running it for a write's pump or two.
_VERSIONS = select(Pump.id, PumpDataVersion.version).outerjoin(PumpDataVersion, PumpDataVersion.pump_id == Pump.id)
_VERSIONS_OF = _VERSIONS.where(Pump.id.in_(bindparam("ids", expanding=True)))
_PRIORS = select(FleetPrior.kind, FleetPrior.detail)


def data_versions(session: Session, pump_ids=None) -> dict[int, int]:
    """pump_id -> data version (0 for a pump no write has counted yet)."""
    if pump_ids is None:
        rows = session.execute(_VERSIONS)
    else:
        rows = session.execute(_VERSIONS_OF, {"ids": [int(p) for p in pump_ids]})
    return {pump_id: version or 0 for pump_id, version in rows}


def stored_priors(session: Session) -> pd.DataFrame | None:
    rows = session.execute(_PRIORS).all()  # plain rows, no ORM objects
    return priors_frame([(kind, detail) for kind, detail in rows]) if rows else None


def priors_frame(rows: list[tuple]) -> pd.DataFrame:
    """The kinds' stored fleet life figures (``rows``: kind, detail) as the engine's priors frame, one row per kind.
    When every figure is a number or None (the usual case: a fit's figures, an empty note) the columns are made
    as floats at once (_number_columns); otherwise a frame of the details, each column of numbers made floats."""
    index = pd.Index([kind for kind, _ in rows], name="kind")
    numbers = _number_columns([detail for _, detail in rows])
    if numbers is not None:
        return pd.DataFrame(numbers, index=index)
    frame = pd.DataFrame([{**detail} for _, detail in rows], index=index)
    # JSON gives None for a kind without a fit; the engine wants NaN in float columns.
    for column in frame.columns:
        if frame[column].dtype == float:  # numbers already (most figures)
            continue
        numbers = pd.to_numeric(frame[column], errors="coerce")
        if numbers.notna().sum() == frame[column].notna().sum():
            frame[column] = numbers.astype(float)
    return frame


def _number_columns(details: list[dict]) -> dict[str, np.ndarray] | None:
    """The details' fields as float columns (a field a detail lacks, or None: NaN), in the order a frame of the
    details gives its columns, when every value is an int, a float or None: what priors_frame's frame steps make
    of them, without a frame's inference per column. None otherwise (text, a flag, no fields), for those steps."""
    names: dict[str, None] = {}
    for detail in details:
        for name, value in detail.items():
            if value is not None and type(value) is not float and type(value) is not int:
                return None
            names[name] = None
    if not names:
        return None
    return {name: np.array([detail.get(name) for detail in details], dtype=float) for name in names}


def analyse(session: Session, pump_ids=None, now: datetime | None = None,
            settings: AnalysisSettings | None = None) -> FleetAnalysis:
    """Compute (without storing) the analysis of ``pump_ids`` (None: the fleet)."""
    now = now or utcnow()
    pump_ids = None if pump_ids is None else list(pump_ids)
    # One pump (the analysis after a write): its own few queries, not the fleet loader's machinery.
    frames = one_pump_frames(session, pump_ids[0], now) if pump_ids is not None and len(pump_ids) == 1 else None
    frames = frames or load_frames(session, pump_ids, as_of=now)
    priors = None if pump_ids is None else stored_priors(session)
    return analyze_fleet(frames.pumps, frames.readings, frames.events, frames.samples, frames.flow_points,
                         now=now, settings=settings, priors=priors)


def one_pump_frames(session: Session, pump_id: int, now: datetime) -> FleetFrames | None:
    """load_frames of one pump, from the pump page's few plain queries of that pump's rows
    (fleet.services.pages.pump_rows; tests/test_pump_page_rows.py holds them equal), without the fleet loader's
    joins and maps; None for a pump not on record."""
    from fleet.services.pages.pump_rows import core_rows  # that module reads this package's frames: import late

    pump = session.get(Pump, int(pump_id))
    if pump is None:
        return None
    rows = core_rows(session, pump, now)  # the page's queries, without the rows only the page shows
    machine_id = rows.pumps["machine_id"].iloc[0]
    # core_rows keeps what was known by ``now`` already; the lab results are kept so here.
    samples = load_samples(session, [] if pd.isna(machine_id) else [int(machine_id)], known_by=pd.Timestamp(now))
    return FleetFrames(pumps=rows.pumps, readings=rows.readings, flow_points=rows.flow_points, events=rows.events,
                       samples=samples)


@dataclass
class Part:
    """One part of a full analysis: its pumps' results, service intervals and interval trends."""

    results: pd.DataFrame
    intervals: pd.DataFrame
    trends: pd.DataFrame


def analyse_part(session: Session, pump_ids, now: datetime, settings: AnalysisSettings) -> Part:
    """The engine on one part of the fleet (the same whether run here or in a worker process)."""
    part = analyse(session, pump_ids, now, settings)
    return Part(part.results, part.intervals, interval_trends(part.fit_columns(), part.intervals,
                                                                 settings.confidence))


def analyse_results(session: Session, pump_ids=None, now: datetime | None = None,
                    settings: AnalysisSettings | None = None, chunk_pumps: int | None = None,
                    workers: int = 1, url: str | None = None, worker_peaks_mb: dict[int, float] | None = None,
                    ) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """(results, service lives, interval trends) of ``pump_ids`` (None: the fleet).

    The fleet is analysed ``chunk_pumps`` (default CHUNK_PUMPS) pumps at a time, so memory stays bounded by one
    part. A pump's figures depend only on its own data and the fleet priors; those are fitted once from every
    part's service intervals and then given to every pump (fleet.trend.engine.apply_priors), so the results are the
    same as one pass over the whole fleet. With ``workers`` > 1 and the database's ``url``, the parts run in that many
    worker processes (fleet.services.analysis.parallel), each reading committed data in its own transaction:
    only for a caller whose session holds no writes of its own; each worker's peak resident memory is noted in
    ``worker_peaks_mb`` when given (the benchmark counts it).
    """
    now = now or utcnow()
    settings = settings or AnalysisSettings()
    ids = list(session.scalars(select(Pump.id).order_by(Pump.id))) if pump_ids is None else sorted(pump_ids)
    if not ids:
        frames = load_frames(session, [], as_of=now)
        part = analyze_fleet(frames.pumps, frames.readings, frames.events, frames.samples, frames.flow_points,
                             now=now, settings=settings)
        return part.results, interval_lives(part.intervals), interval_trends(part.fit_columns(),
                                                                             part.intervals, settings.confidence)
    chunk_pumps = chunk_pumps or CHUNK_PUMPS
    pooled = workers > 1 and len(ids) > chunk_pumps and url is not None
    id_parts = part_ids(ids, chunk_pumps, workers if pooled else 1)
    if pooled:
        from fleet.services.analysis.parallel import parts_in_workers

        parts = parts_in_workers(url, id_parts, now, settings, workers, worker_peaks_mb)
    else:
        parts = [analyse_part(session, part_ids, now, settings) for part_ids in id_parts]
    results = pd.concat([p.results for p in parts]) if len(parts) > 1 else parts[0].results
    all_intervals = pd.concat([p.intervals for p in parts], ignore_index=True)
    if pump_ids is None:
        if len(parts) > 1:  # each part ranked its own pumps: rank the fleet
            results["rank"] = service_rank(results).to_numpy()
        apply_priors(results, fit_priors(all_intervals, results["kind"], settings), now)
    return results, interval_lives(all_intervals), pd.concat([p.trends for p in parts], ignore_index=True)


def compute(session: Session, pump_ids=None, now: datetime | None = None,
            settings: AnalysisSettings | None = None, workers: int = 1) -> Computed:
    """Analyse ``pump_ids`` (None: the whole fleet) from what ``session`` sees; nothing is written.

    ``workers`` > 1 runs the parts in worker processes that read committed data (analyse_results): only for a
    session that has written nothing itself.
    """
    computed_at = now or utcnow()
    versions = data_versions(session, pump_ids)  # first: the data read next is at least this new
    ids = None if pump_ids is None else sorted(set(versions))
    url = None
    if workers > 1:
        from fleet.services.analysis.parallel import shareable

        url = session.get_bind().url.render_as_string(hide_password=False)
        url = url if shareable(url) else None  # a private in-memory database: the parts run here
    peaks: dict[int, float] = {}
    results, lives, trends = analyse_results(session, ids, computed_at, settings, workers=workers, url=url,
                                             worker_peaks_mb=peaks)
    return Computed(results, lives, trends, versions, computed_at, full=pump_ids is None, worker_peaks_mb=peaks)
