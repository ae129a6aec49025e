"""Run the parts of a full analysis in worker processes, so a fleet run uses every core of the server.

Each worker is a fresh interpreter ('spawn'): nothing of the parent's engine, pool or connections crosses into it
(a connection shared across fork corrupts both ends). It opens its own engine from the database URL, reads its
part of the pumps in its own read transaction, runs the engine and sends back the part's rows. The parent reads
the data versions before any worker starts, so a write landing meanwhile leaves its pump stale, never hidden,
and fits the fleet priors once from every part's intervals (fleet.services.analysis.compute).
"""

import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor
from datetime import datetime

from sqlalchemy.engine import make_url

from fleet.services.analysis.compute import Part, analyse_part
from fleet.trend.settings import AnalysisSettings

WORKERS_ENV = "FLEET_ANALYSIS_WORKERS"


def worker_count(requested: int | None = None) -> int:
    """Worker processes for a full analysis: ``requested``, else $FLEET_ANALYSIS_WORKERS, else the CPU count."""
    if requested is None:
        text = os.environ.get(WORKERS_ENV, "").strip()
        if not text:
            return os.cpu_count() or 1
        try:
            requested = int(text)
        except ValueError:
            raise ValueError(f"{WORKERS_ENV}={text!r}: expected a whole number of worker processes "
                             "(1 or more)") from None
    if requested < 1:
        raise ValueError(f"workers: {requested} is not a number of worker processes (1 or more; 1 runs in-process)")
    return requested


def shareable(url: str) -> bool:
    """Whether other processes can open the same database (an in-memory SQLite database is private)."""
    parsed = make_url(url)
    if not parsed.get_backend_name().startswith("sqlite"):
        return True
    return parsed.database not in (None, "", ":memory:") and parsed.query.get("mode") != "memory"


def peak_resident_mb() -> float | None:
    """This process's peak resident memory (VmHWM), None where /proc is not there."""
    try:
        with open("/proc/self/status") as status:
            for line in status:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0  # kB
    except OSError:
        return None
    return None


def _part_in_worker(url: str, pump_ids: list[int], now: datetime,
                    settings: AnalysisSettings) -> tuple[Part, int, float | None]:
    from sqlalchemy.orm import Session

    from fleet.db.engine import make_engine

    engine = make_engine(url)
    try:
        with Session(engine) as session, session.begin():
            part = analyse_part(session, pump_ids, now, settings)
    finally:
        engine.dispose()
    return part, os.getpid(), peak_resident_mb()


def parts_in_workers(url: str, id_parts: list[list[int]], now: datetime, settings: AnalysisSettings, workers: int,
                     peaks_mb: dict[int, float] | None = None) -> list[Part]:
    """Each list of pump ids analysed in one of ``workers`` processes; the parts in the order given."""
    context = multiprocessing.get_context("spawn")
    parts = []
    with ProcessPoolExecutor(max_workers=min(workers, len(id_parts)), mp_context=context) as pool:
        futures = [pool.submit(_part_in_worker, url, ids, now, settings) for ids in id_parts]
        try:
            for future in futures:
                part, pid, peak = future.result()
                parts.append(part)
                if peaks_mb is not None and peak is not None:
                    peaks_mb[pid] = max(peak, peaks_mb.get(pid, 0.0))
        except BaseException:
            pool.shutdown(wait=True, cancel_futures=True)  # one part failed: the rest is not wanted
            raise
    return parts
