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
takes each part as soon as it is written (to store it while the workers go on). The fork server's imports take
seconds in which no worker computes; a full analysis (fleet.services.analysis.refresh.fleet_afresh) has the parent,
which has those libraries imported already, spool the first part itself meanwhile (_each's ``here``). A worker
gives back the memory Arrow kept of a part before its next (_give_back_memory), and the parent its heap too
after its own parts: the run's peak is the sum over its processes.
"""

import ctypes
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
    _give_back_memory(heap=False)  # the worker waits for its next part, or for the end, without Arrow's spare pages
    return done, os.getpid(), peak


def _preload(url: str) -> list[str]:
    """The modules the fork server imports for workers that open ``url``: PRELOAD and the URL's dialect."""
    return [*PRELOAD, make_url(url).get_dialect().__module__]


def _pool(workers: int, parts: int, url: str) -> ProcessPoolExecutor:
    """Up to ``workers`` processes forked from the preloaded fork server where there is one (Linux), each taking
    parts until none is left; elsewhere fresh interpreters ('spawn'). The fork server is this process's one, started
    by its first pool: a later pool's workers open another kind of database with its dialect imported by each."""
    if "forkserver" in multiprocessing.get_all_start_methods():
        context = multiprocessing.get_context("forkserver")
        context.set_forkserver_preload(_preload(url))
    else:
        context = multiprocessing.get_context("spawn")
    return ProcessPoolExecutor(max_workers=min(workers, parts), mp_context=context)


def _each(work, url: str, arguments: list[tuple], workers: int, peaks_mb: dict[int, float] | None,
          here=None) -> Iterator:
    """``work(session, *each)`` for each of ``arguments`` in the workers; each answer given back, in the order
    given, as soon as it and those before it are done, while the workers go on with the rest.

    ``here`` (``here(*each)``, the same work in this process), when given, works the first of the arguments in
    this process while a helper thread hands the rest to the pool, whose first submit waits seconds for the fork
    server to import its libraries (which this process has already): no core waits for the imports. One only: a
    second would run beside the workers' first parts, three parts' memory at once (the run's peak is the sum over
    its processes). This process gives its memory back to the system after it (_give_back_memory)."""
    with _pool(workers, len(arguments), url) as pool:
        if here is None:
            yield from _answers(pool, [pool.submit(_in_worker, url, work, *each) for each in arguments], peaks_mb)
            return
        futures: list = []
        failed: list[BaseException] = []
        stop = threading.Event()

        def hand_over() -> None:
            try:
                for each in arguments[1:]:
                    if stop.is_set():
                        return
                    futures.append(pool.submit(_in_worker, url, work, *each))
            except BaseException as error:  # raised in the caller's thread, after the part computed here
                failed.append(error)

        starter = threading.Thread(target=hand_over, name="fleet-analysis-workers", daemon=True)
        starter.start()
        try:
            yield here(*arguments[0])
            _give_back_memory()
            starter.join()
            if failed:
                raise failed[0]
        except BaseException:  # the part failed here, or the caller stopped taking answers: the rest is not wanted
            stop.set()
            starter.join()
            pool.shutdown(wait=True, cancel_futures=True)
            raise
        yield from _answers(pool, futures, peaks_mb)


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


def _give_back_memory(heap: bool = True) -> None:
    """Hand the memory a part freed back to the system: Arrow's pool keeps what it freed for its next allocation
    (about 60 MB after a part of the benchmark's fleet), and with ``heap`` glibc's heap its free pages (malloc_trim,
    a few milliseconds; nothing on another C library). A full analysis's peak memory is the sum over its processes
    at one moment, so neither a worker between parts nor this process, storing while the workers compute, should
    hold more than it uses. A worker keeps its heap (``heap=False``): faulting the pages in again costs its next
    part about 50 ms of CPU (3 %), where Arrow's pool comes back for nothing measurable. A part leaves no garbage in
    cycles worth a collection (0.1 s)."""
    arrow = sys.modules.get("pyarrow")  # only where the part's work imported it
    if arrow is not None:
        arrow.default_memory_pool().release_unused()
    if not heap:
        return
    try:
        trim = ctypes.CDLL(None).malloc_trim
    except (OSError, AttributeError):  # not glibc
        return
    trim(0)


def parts_in_workers(url: str, id_parts: list[list[int]], now: datetime, settings: AnalysisSettings, workers: int,
                     peaks_mb: dict[int, float] | None = None) -> list[Part]:
    """Each list of pump ids analysed in one of ``workers`` processes; the parts in the order given."""
    return list(_each(analyse_part, url, [(ids, now, settings) for ids in id_parts], workers, peaks_mb))


def spool_in_workers(url: str, id_parts: list[list[int]], paths: list[Path], now: datetime,
                     settings: AnalysisSettings, workers: int, peaks_mb: dict[int, float] | None = None,
                     here=None) -> Iterator[PartSummary]:
    """Each list of pump ids analysed in one of ``workers`` processes and written to its path
    (fleet.services.analysis.spool.spool_part); their summaries in the order given, each as soon as it is done.
    ``here(ids, now, settings, path)``, when given, spools the first part in this process while the workers start
    (_each)."""
    return _each(spool_part, url, [(ids, now, settings, path) for ids, path in zip(id_parts, paths, strict=True)],
                 workers, peaks_mb, here)
