"""A full analysis computed part by part into files, so no process ever holds the whole fleet's results.

Each part of the fleet (CHUNK_PUMPS pumps, fleet.services.analysis.compute) is analysed, in this process or in a
worker (fleet.services.analysis.parallel), and written at once to its own file in a private temporary folder, in the
form the store inserts: each pump's record (fleet.trend.engine.results_to_records) with its stored detail already as
JSON text, the service lives, and each interval's trend with its fit as JSON text (a fit holds the line of every
wear-law member with weight, about 8 kB of JSON per interval at 10,000 pumps). Turning figures into records and JSON
where they were computed keeps that work on the workers, in parallel, and out of the main process, which stores.
Nothing of a stored record depends on the fleet priors (each pump's prior figures are derived when read, from the
kinds' fleet life figures that the store refits from the stored service lives), so a part can be stored as soon as
it is written (fleet.services.analysis.refresh.fleet_afresh stores each in its own short write while the workers go
on with the next). The folder is removed when the caller is done with it.
"""

import pickle
import shutil
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

import orjson
import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

import fleet.services.analysis.compute as compute_module
from fleet.db.models import Pump
from fleet.services.analysis.compute import analyse_part, data_versions, part_ids
from fleet.services.analysis.store import NOT_IN_DETAIL
from fleet.timeutil import utcnow
from fleet.trend.engine import results_to_records
from fleet.trend.intervals import interval_lives
from fleet.trend.settings import AnalysisSettings


@dataclass
class SpooledPart:
    """One part as its file holds it: its results (one row per pump, index pump_id: what the prior figures are
    computed from), each pump's record and its detail as JSON text (in the order of the results), service lives,
    interval trends (the columns of table interval_trend, with ``fit_json`` the fit as JSON text)."""

    results: pd.DataFrame
    records: list[dict]
    details: list[str]
    lives: pd.DataFrame
    trends: pd.DataFrame


@dataclass
class PartSummary:
    """What comes back of a spooled part: its file and how many pumps it holds."""

    path: Path
    pumps: int


@dataclass
class FleetPlan:
    """A full analysis's parts, before any is computed: the data versions read first, the parts' pumps and files,
    and the database URL the workers open (None: the parts run in the caller's process)."""

    computed_at: datetime
    versions: dict[int, int]  # pump_id -> data version read before the data
    id_parts: list[list[int]]
    paths: list[Path]
    url: str | None
    workers: int
    pumps: int
    worker_peaks_mb: dict[int, float] = field(default_factory=dict)  # worker process id -> its peak memory


@dataclass
class SpooledAnalysis:
    """A full analysis waiting in files to be stored (fleet.services.analysis.store_fleet.store_spooled)."""

    parts: list[Path]
    versions: dict[int, int]  # pump_id -> data version read before the data
    computed_at: datetime
    pumps: int
    worker_peaks_mb: dict[int, float] = field(default_factory=dict)  # worker process id -> its peak memory


def spool_part(session: Session, pump_ids: list[int], now: datetime, settings: AnalysisSettings,
               path: Path) -> PartSummary:
    """Analyse ``pump_ids`` and write the part to ``path`` (the same whether run here or in a worker)."""
    part = analyse_part(session, pump_ids, now, settings)
    records = results_to_records(part.results)  # JSON-ready already: json_ready would give each value back as it is
    details = [json_text({k: v for k, v in record.items() if k not in NOT_IN_DETAIL}) for record in records]
    trends = part.trends.drop(columns="fit")
    trends["fit_json"] = [json_text(fit) for fit in part.trends["fit"]]
    lives = interval_lives(part.intervals)
    with open(path, "wb") as out:
        pickle.dump(SpooledPart(part.results, records, details, lives, trends), out, protocol=pickle.HIGHEST_PROTOCOL)
    return PartSummary(path, len(records))


def json_text(value) -> str:
    """``value`` (JSON-ready: plain Python, no NaN or infinity; fleet.jsonvalues.json_ready) as JSON text, by orjson
    (a tenth of the time of Python's encoder on a part's fits): the same values come back from it as from
    json.dumps' text, each float written to its shortest text that reads back to it (tests/test_analysis_spooled.py
    compares them)."""
    return orjson.dumps(value).decode()


def read_part(path: Path) -> SpooledPart:
    """A part back from its file (written by spool_part into this run's own private folder)."""
    with open(path, "rb") as source:
        return pickle.load(source)


@contextmanager
def spool_folder() -> Iterator[Path]:
    """A private temporary folder for one run's part files (mode 0700), removed with everything in it after."""
    folder = Path(tempfile.mkdtemp(prefix="fleet-analysis-"))
    try:
        yield folder
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def plan_fleet(session: Session, folder: Path, now: datetime | None = None, settings: AnalysisSettings | None = None,
               workers: int = 1, chunk_pumps: int | None = None) -> FleetPlan:
    """Read the data versions (first: the data read next is at least this new) and cut the fleet into parts, each
    with its file in ``folder`` (spool_folder); with ``workers`` > 1 and a database other processes can open, the
    parts go to that many worker processes (as many parts as a multiple of theirs, compute.part_ids)."""
    computed_at = now or utcnow()
    versions = data_versions(session)
    ids = list(session.scalars(select(Pump.id).order_by(Pump.id)))
    chunk_pumps = chunk_pumps or compute_module.CHUNK_PUMPS
    url = _shared_url(session) if workers > 1 and len(ids) > chunk_pumps else None
    id_parts = part_ids(ids, chunk_pumps, workers if url is not None else 1)
    paths = [folder / f"part-{number:05d}.pickle" for number in range(len(id_parts))]
    return FleetPlan(computed_at, versions, id_parts, paths, url, workers, len(ids))


def spool_parts(session: Session | None, plan: FleetPlan, settings: AnalysisSettings,
                fork: bool = False) -> Iterable[PartSummary]:
    """Each part of ``plan`` analysed and written to its file, each given back as soon as it is written: by the
    workers (which read committed data in transactions of their own, so ``session`` may be None and the caller free
    to store the parts meanwhile; forked from this process with ``fork``, for a caller that holds no connection
    open: fleet.services.analysis.parallel), else in ``session``'s read transaction, one after another, in the
    plan's order."""
    if plan.url is not None:
        from fleet.services.analysis.parallel import spool_in_workers

        return spool_in_workers(plan.url, plan.id_parts, plan.paths, plan.computed_at, settings, plan.workers,
                                plan.worker_peaks_mb, fork)
    return (spool_part(session, part, plan.computed_at, settings, path)
            for part, path in zip(plan.id_parts, plan.paths, strict=True))


def spool_fleet(session: Session, folder: Path, now: datetime | None = None,
                settings: AnalysisSettings | None = None, workers: int = 1,
                chunk_pumps: int | None = None) -> SpooledAnalysis:
    """Analyse the whole fleet part by part into files in ``folder`` (spool_folder); nothing is written to the
    database.

    ``workers`` > 1 runs the parts in that many worker processes reading committed data (only for a session that
    has written nothing itself; a private in-memory database stays in this process).
    """
    settings = settings or AnalysisSettings()
    plan = plan_fleet(session, folder, now, settings, workers, chunk_pumps)
    summaries = list(spool_parts(session, plan, settings))
    return SpooledAnalysis([summary.path for summary in summaries], plan.versions, plan.computed_at, plan.pumps,
                           plan.worker_peaks_mb)


def _shared_url(session: Session) -> str | None:
    """The session's database URL if other processes can open it, else None (the parts then run here)."""
    from fleet.services.analysis.parallel import shareable

    url = session.get_bind().url.render_as_string(hide_password=False)
    return url if shareable(url) else None
