"""Run the parts of a full analysis in worker processes, so a fleet run uses every core of the server.

A full analysis (fleet.services.analysis.refresh.fleet_afresh) forks its workers from its own process ('fork'),
which has the analysis's libraries imported already: the workers start at once and share those pages (about 190 MB
of numpy, pandas, scipy and SQLAlchemy) until one writes to them. It forks only where that is safe: the caller has
closed every connection of its engine first (a connection shared across fork corrupts both ends; SQLite keeps its
locks per process) and runs no other thread (a lock another thread held at the fork stays held in the child for
good); otherwise (fork_ready false, or another caller) the workers are forked from a server process that was
started fresh and imports the libraries once ('forkserver'; seconds in which no worker computes), and where
neither exists they are fresh interpreters ('spawn'). Each worker analyses part after part until none is left: a
fresh fork per part paid for its heap's page faults and its engine's SQL compilation anew each time (about half a
second of CPU in a part of 3 s, measured on the benchmark's fleet), and a worker's memory stays near one part's
whatever the number of parts. A worker makes its engine from the database URL once (the compiled statements cached
with it), reads each part of the pumps in a read transaction of its own, with the engine's connections closed
again after each part, runs the engine and writes the part to its file (fleet.services.analysis.spool), sending
back only the file's name. The parent reads the data versions before any worker starts, so a write landing
meanwhile leaves its pump stale, never hidden, and takes each part as soon as it is written (to store it while the
workers go on). A worker gives back the memory Arrow kept of a part before its next (_give_back_memory): the
run's peak is the sum over its processes.
"""

import multiprocessing
import os
import sys
import threading
from collections.abc import Iterator
from concurrent.futures import ProcessPoolExecutor
from datetime import datetime
from pathlib import Path

from sqlalchemy.engine import make_url

from fleet.services.analysis.compute import Part, analyse_part
from fleet.services.analysis.spool import PartSummary, spool_part
from fleet.trend.settings import AnalysisSettings

WORKERS_ENV = "FLEET_ANALYSIS_WORKERS"
# Imported once by the fork server, so every worker forked from it shares these modules' pages (scipy.stats only
# where the engine's modules import it), with the database's dialect (_preload): only the one the URL names, as
# PostgreSQL's package loads every driver's dialect (about 0.15 s a SQLite run would spend for nothing).
PRELOAD = ("numpy", "pandas", "scipy.special", "scipy.optimize", "sqlalchemy.orm", "fleet.db.engine",
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
    its peak memory. The engine is kept for the worker's next part, its connections closed after each, and the memory
    Arrow kept of the part given back."""
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
    peak = peak_resident_mb()
    _give_back_memory()  # the worker waits for its next part, or for the end, without Arrow's spare pages
    return done, os.getpid(), peak


def _preload(url: str) -> list[str]:
    """The modules the fork server imports for workers that open ``url``: PRELOAD and the URL's dialect."""
    return [*PRELOAD, make_url(url).get_dialect().__module__]


def fork_ready() -> bool:
    """Whether workers can be forked from this process: the platform forks ('fork' is a start method) and this
    process runs no thread but the one asking. The caller must also hold no database connection open (dispose its
    engine) before the workers start."""
    return "fork" in multiprocessing.get_all_start_methods() and threading.active_count() == 1


def _pool(workers: int, parts: int, url: str, fork: bool = False) -> ProcessPoolExecutor:
    """Up to ``workers`` processes, each taking parts until none is left: with ``fork`` (the caller disposed its
    engine) and where fork_ready, forked from this process at the pool's first submit, all at once, before the
    pool's own thread starts; else forked from the preloaded fork server (Linux), else fresh interpreters
    ('spawn'). The fork server is this process's one, started by its first pool: a later pool's workers open
    another kind of database with its dialect imported by each."""
    methods = multiprocessing.get_all_start_methods()
    if fork and fork_ready():
        context = multiprocessing.get_context("fork")
    elif "forkserver" in methods:
        context = multiprocessing.get_context("forkserver")
        context.set_forkserver_preload(_preload(url))
    else:
        context = multiprocessing.get_context("spawn")
    return ProcessPoolExecutor(max_workers=min(workers, parts), mp_context=context)


def _each(work, url: str, arguments: list[tuple], workers: int, peaks_mb: dict[int, float] | None,
          fork: bool = False) -> Iterator:
    """``work(session, *each)`` for each of ``arguments`` in the workers (forked from this process with ``fork``,
    _pool); each answer given back, in the order given, as soon as it and those before it are done, while the
    workers go on with the rest. Every part is submitted at once, from the caller's thread."""
    with _pool(workers, len(arguments), url, fork) as pool:
        yield from _answers(pool, [pool.submit(_in_worker, url, work, *each) for each in arguments], peaks_mb)


def _answers(pool: ProcessPoolExecutor, futures: list, peaks_mb: dict[int, float] | None) -> Iterator:
    """Each future's answer in the order given, noting each worker's peak memory; the rest cancelled if one fails
    or the caller stops taking them."""
    try:
        for future in futures:
            answer, pid, peak = future.result()
            if peaks_mb is not None and peak is not None:
                peaks_mb[pid] = max(peak, peaks_mb.get(pid, 0.0))
            yield answer
    except BaseException:  # a part failed, or the caller stopped taking answers: the rest is not wanted
        pool.shutdown(wait=True, cancel_futures=True)
        raise


def _give_back_memory() -> None:
    """Hand back to the system the memory Arrow's pool keeps of a part for its next allocation (about 60 MB after a
    part of the benchmark's fleet): a full analysis's peak memory is the sum over its processes at one moment, so a
    worker between parts should not hold more than it uses. The worker keeps its heap (no malloc_trim): faulting
    the pages in again cost its next part about 50 ms of CPU (3 %), where Arrow's pool comes back for nothing
    measurable. A part leaves no garbage in cycles worth a collection (0.1 s)."""
    arrow = sys.modules.get("pyarrow")  # only where the part's work imported it
    if arrow is not None:
        arrow.default_memory_pool().release_unused()


def parts_in_workers(url: str, id_parts: list[list[int]], now: datetime, settings: AnalysisSettings, workers: int,
                     peaks_mb: dict[int, float] | None = None) -> list[Part]:
    """Each list of pump ids analysed in one of ``workers`` processes; the parts in the order given."""
    return list(_each(analyse_part, url, [(ids, now, settings) for ids in id_parts], workers, peaks_mb))


def spool_in_workers(url: str, id_parts: list[list[int]], paths: list[Path], now: datetime,
                     settings: AnalysisSettings, workers: int, peaks_mb: dict[int, float] | None = None,
                     fork: bool = False) -> Iterator[PartSummary]:
    """Each list of pump ids analysed in one of ``workers`` processes (forked from this one with ``fork``: the
    caller holds no connection open, _pool) and written to its path (fleet.services.analysis.spool.spool_part);
    their summaries in the order given, each as soon as it is done."""
    return _each(spool_part, url, [(ids, now, settings, path) for ids, path in zip(id_parts, paths, strict=True)],
                 workers, peaks_mb, fork)
