"""A full analysis computed part by part into files, so no process ever holds the whole fleet's results.

Each part of the fleet (CHUNK_PUMPS pumps, fleet.services.analysis.compute) is analysed, in this process or in a
worker (fleet.services.analysis.parallel), and written at once to its own file in a private temporary folder, in
the form the store inserts: each pump's record (fleet.trend.engine.results_to_records) with its stored detail
already as JSON text, the service lives, and each interval's trend with its fit as JSON text (a fit holds every
wear-law member's line, about 26 kB of JSON per interval). Turning figures into records and JSON where they were
computed keeps that work on the workers, in parallel, and out of the main process, which stores alone. The prior
figures are the one part of a record left to fill: only each part's service lives and pump kinds come back to the
caller, which fits the fleet priors once from all of them (fleet.trend.engine.fit_priors); each pump gets its
figures when its part is stored (fleet.services.analysis.store_fleet; nothing else in a record depends on the
priors). The folder is removed when the caller is done with it.
"""

import pickle
import shutil
import tempfile
from collections.abc import Iterator
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
from fleet.trend.weibull import fit_fleet_priors


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
    """What comes back of a spooled part: its file, and what the fleet priors are fitted from."""

    path: Path
    lives: pd.DataFrame
    kinds: pd.Series  # pump_id -> kind


@dataclass
class SpooledAnalysis:
    """A full analysis waiting in files to be stored (fleet.services.analysis.store_fleet.store_spooled)."""

    parts: list[Path]
    priors: pd.DataFrame  # the fleet Weibull of each kind, fitted once from every part's service lives
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
    return PartSummary(path, lives, part.results["kind"])


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


def spool_fleet(session: Session, folder: Path, now: datetime | None = None,
                settings: AnalysisSettings | None = None, workers: int = 1,
                chunk_pumps: int | None = None) -> SpooledAnalysis:
    """Analyse the whole fleet part by part into files in ``folder`` (spool_folder); nothing is written to the
    database.

    ``workers`` > 1 runs the parts in that many worker processes reading committed data (only for a session that
    has written nothing itself; a private in-memory database stays in this process).
    """
    computed_at = now or utcnow()
    settings = settings or AnalysisSettings()
    versions = data_versions(session)  # first: the data read next is at least this new
    ids = list(session.scalars(select(Pump.id).order_by(Pump.id)))
    chunk_pumps = chunk_pumps or compute_module.CHUNK_PUMPS
    url = _shared_url(session) if workers > 1 and len(ids) > chunk_pumps else None
    id_parts = part_ids(ids, chunk_pumps, workers if url is not None else 1)
    paths = [folder / f"part-{number:05d}.pickle" for number in range(len(id_parts))]
    peaks: dict[int, float] = {}
    if url is not None:
        from fleet.services.analysis.parallel import spool_in_workers

        summaries = spool_in_workers(url, id_parts, paths, computed_at, settings, workers, peaks)
    else:
        summaries = [spool_part(session, part, computed_at, settings, path)
                     for part, path in zip(id_parts, paths, strict=True)]
    if summaries:
        lives = pd.concat([s.lives for s in summaries], ignore_index=True)
        kinds = pd.concat([s.kinds for s in summaries])
        priors = fit_fleet_priors(lives, kinds, settings.min_weibull_failures)
    else:
        priors = pd.DataFrame()
    return SpooledAnalysis(paths, priors, versions, computed_at, len(ids), peaks)


def _shared_url(session: Session) -> str | None:
    """The session's database URL if other processes can open it, else None (the parts then run here)."""
    from fleet.services.analysis.parallel import shareable

    url = session.get_bind().url.render_as_string(hide_password=False)
    return url if shareable(url) else None
