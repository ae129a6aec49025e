"""Run the parts of a full analysis in worker processes, so a fleet run uses every core of the server.

Workers are forked from a server process ('forkserver') that was started fresh and has imported the analysis's
libraries once, before any database was opened: nothing of the parent's engine, pool or connections crosses
into a worker (a connection shared across fork corrupts both ends), and the libraries' memory (about 190 MB of
numpy, pandas, scipy and SQLAlchemy) is shared between the workers until one writes to it, instead of loaded
again by each. Each worker analyses part after part until none is left: a fresh fork per part paid for its heap's
page faults and its engine's SQL compilation anew each time (about half a second of CPU in a part of 3 s, measured
on the benchmark's fleet), and a worker's memory stays near one part's whatever the number of parts. A worker makes
its engine from the database URL once (the compiled statements cached with it), reads each part of the pumps in a
read transaction of its own, with the engine's connections closed again after each part, runs the engine and
writes the part to its file (fleet.services.analysis.spool), sending back only the file's name. The parent reads
the data versions before any worker starts, so a write landing meanwhile leaves its pump stale, never hidden, and
takes each part as soon as it is written (to store it while the workers go on).
"""

import multiprocessing
import os
from collections.abc import Iterator
from concurrent.futures import ProcessPoolExecutor
from datetime import datetime
from pathlib import Path

from sqlalchemy.engine import make_url

from fleet.services.analysis.compute import Part, analyse_part
from fleet.services.analysis.spool import PartSummary, spool_part
from fleet.trend.settings import AnalysisSettings

WORKERS_ENV = "FLEET_ANALYSIS_WORKERS"
# Imported once by the fork server, so every worker forked from it shares these modules' pages.
PRELOAD = ("numpy", "pandas", "scipy.stats", "scipy.optimize", "sqlalchemy.orm", "sqlalchemy.dialects.sqlite",
           "sqlalchemy.dialects.postgresql.psycopg", "fleet.db.engine",
           "fleet.services.analysis.spool")


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


# The worker's engine per database URL, made by its first part and kept for the next ones (a worker process only).
_ENGINES: dict = {}


def _in_worker(url: str, work, *arguments):
    """``work(session, *arguments)`` in a read transaction of the worker's own engine; with the worker's id and
    its peak memory. The engine is kept for the worker's next part, its connections closed after each."""
    from sqlalchemy.orm import Session

    from fleet.db.engine import make_engine

    engine = _ENGINES.get(url)
    if engine is None:
        engine = _ENGINES[url] = make_engine(url)
    try:
        with Session(engine) as session, session.begin():
            done = work(session, *arguments)
    finally:
        engine.dispose()  # no connection held between parts; the engine keeps its compiled statements
    return done, os.getpid(), peak_resident_mb()


def _pool(workers: int, parts: int) -> ProcessPoolExecutor:
    """Up to ``workers`` processes forked from the preloaded fork server where there is one (Linux), each taking
    parts until none is left; elsewhere fresh interpreters ('spawn')."""
    if "forkserver" in multiprocessing.get_all_start_methods():
        context = multiprocessing.get_context("forkserver")
        context.set_forkserver_preload(list(PRELOAD))
    else:
        context = multiprocessing.get_context("spawn")
    return ProcessPoolExecutor(max_workers=min(workers, parts), mp_context=context)


def _each(work, url: str, arguments: list[tuple], workers: int, peaks_mb: dict[int, float] | None) -> Iterator:
    """``work(session, *each)`` for each of ``arguments`` in the workers; each answer given back, in the order
    given, as soon as it and those before it are done, while the workers go on with the rest."""
    with _pool(workers, len(arguments)) as pool:
        futures = [pool.submit(_in_worker, url, work, *each) for each in arguments]
        try:
            for future in futures:
                answer, pid, peak = future.result()
                if peaks_mb is not None and peak is not None:
                    peaks_mb[pid] = max(peak, peaks_mb.get(pid, 0.0))
                yield answer
        except BaseException:  # a part failed, or the caller stopped taking answers: the rest is not wanted
            pool.shutdown(wait=True, cancel_futures=True)
            raise


def parts_in_workers(url: str, id_parts: list[list[int]], now: datetime, settings: AnalysisSettings, workers: int,
                     peaks_mb: dict[int, float] | None = None) -> list[Part]:
    """Each list of pump ids analysed in one of ``workers`` processes; the parts in the order given."""
    return list(_each(analyse_part, url, [(ids, now, settings) for ids in id_parts], workers, peaks_mb))


def spool_in_workers(url: str, id_parts: list[list[int]], paths: list[Path], now: datetime,
                     settings: AnalysisSettings, workers: int,
                     peaks_mb: dict[int, float] | None = None) -> Iterator[PartSummary]:
    """Each list of pump ids analysed in one of ``workers`` processes and written to its path
    (fleet.services.analysis.spool.spool_part); their summaries in the order given, each as soon as it is done."""
    return _each(spool_part, url, [(ids, now, settings, path) for ids, path in zip(id_parts, paths, strict=True)],
                 workers, peaks_mb)
