"""Benchmark fleet at scale against the machine's own floor (run by hand; CI runs the small size once).

    python3 -m benchmarks.run --size full --out benchmarks/full.json
    python3 -m benchmarks.run --size small --database postgresql+psycopg://USER@HOST:PORT/EMPTY_DATABASE

Builds an invented fleet (benchmarks/synthetic.py) as CSV files, imports it through the code path of
`fleet import` into a SQLite file (or the empty PostgreSQL database --database names), and measures, side by side
in one run:

- CSV import of the readings against plain sqlite3 executemany of the same rows into the same table, in the
  import's own INSERT statements and one transaction, on a copy of the database taken just before the import (same
  schema, pragmas and pumps); on PostgreSQL, a plain psycopg COPY into a table made LIKE the readings table (its
  columns, defaults and indexes);
- the full-fleet analysis (`fleet analyze`: load, analyse in --workers processes, store) against loading the same
  reading columns from the database into numpy arrays; each in its own process, which also reports its peak
  memory: the analysis the largest PSS of itself and all its workers at once, sampled (benchmarks/tree_memory.py);
- the service list page (median of 20) and a pump page with five years of readings, through the Flask test client;
- a new reading posted to POST /api/readings until its pump's refreshed analysis is visible to another session;
- an overhaul and an oil sample imported, until the touched pumps' analysis is stored;
- the start of the command line, `fleet --help`, against the interpreter starting with click (benchmarks/startup.py).
"""

import argparse
import json
import os
import resource
import shutil
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from benchmarks import startup
from benchmarks.synthetic import SIZES, write_fleet

ROOT = Path(__file__).resolve().parents[1]
READING_COLUMNS = ("pump_id", "taken_at", "hours", "pressure_bar", "speed_rpm", "flow_lpm", "drain_lpm", "temp_c",
                   "stroke", "taken_by", "note", "source", "created_at")
LOADED_COLUMNS = ("id", "pump_id", "taken_at", "hours", "pressure_bar", "speed_rpm", "flow_lpm", "drain_lpm",
                  "temp_c", "stroke")
BATCH_ROWS = 500_000
TARGETS = {  # issue 6
    "import_ratio": 1.2, "analysis_s": 60.0,
    "analysis_ratio": 1.5, "analysis_peak_mb": 1024.0,  # issue 12
    "help_ms": 300.0,  # issue 10
    "service_list_ms": 100.0, "pump_page_ms": 150.0, "reading_visible_ms": 50.0,  # issue 12
}


def _sqlite_connect(path: Path) -> sqlite3.Connection:
    """A plain sqlite3 connection with the pragmas fleet's engine sets (fleet.db.engine)."""
    from fleet.db.engine import SQLITE_BUSY_TIMEOUT_MS

    connection = sqlite3.connect(path, isolation_level=None)
    connection.execute("PRAGMA journal_mode=WAL")
    connection.execute("PRAGMA foreign_keys=ON")
    connection.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    connection.execute("PRAGMA synchronous=NORMAL")
    return connection


def _checkpoint(path: Path) -> None:
    connection = sqlite3.connect(path)
    connection.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    connection.close()


def _peak_mb() -> float:
    """This process's peak resident memory. VmHWM belongs to the process image; getrusage's ru_maxrss would
    carry over the parent's peak through fork and exec, reporting the benchmark's own size instead."""
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0  # kB
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # not Linux: the best there is


# --- the parts that run in their own process ---------------------------------------------------------------

def child_analysis(url: str) -> dict:
    """The full analysis `fleet analyze` runs (fleet.services.analysis.refresh.fleet_afresh): the fleet computed
    part by part into files, the parts in $FLEET_ANALYSIS_WORKERS processes, each part stored in its own write as
    soon as it is computed while the workers go on, then the fleet's refit and service order in one more write.

    Peak memory is the largest sum of the PSS of this process and all its descendants (the workers, forked from
    it, or the fork server and its workers) sampled every 0.5 s by a watcher process (benchmarks/tree_memory.py):
    PSS counts the library pages the workers share with the process they were forked from once in all. Beside it,
    the same samples' RSS sum (shared pages once per process) and each process's own high-water mark (VmHWM, RSS):
    this process's, and the largest of the workers' (each takes parts until none is left)."""
    from benchmarks.tree_memory import TreeMemory
    from fleet.db.engine import make_engine, make_session_factory
    from fleet.services.analysis.parallel import worker_count
    from fleet.services.analysis.refresh import fleet_afresh

    workers = worker_count()
    engine = make_engine(url)
    sessions = make_session_factory(engine)
    start_mb = _peak_mb()
    memory = TreeMemory().start()
    marks: dict = {}
    started = time.perf_counter()
    summary = fleet_afresh(sessions, workers=workers, marks=marks)
    seconds = time.perf_counter() - started
    memory.stop()
    engine.dispose()
    own_mb = _peak_mb()
    worker_mb = sorted(marks["worker_peaks_mb"].values())
    return {"seconds": seconds, "compute_s": marks["computed"] - started, "peak_mb": memory.peak_pss_mb,
            "peak_rss_sum_mb": memory.peak_rss_mb, "processes_at_peak": memory.processes_at_peak,
            "own_peak_mb": own_mb, "worker_peak_mb": max(worker_mb, default=0.0),
            "worker_processes": len(worker_mb), "workers": workers, "forked": marks["forked"], "start_mb": start_mb,
            "pumps": summary.pumps,
            "by_status": summary.by_status}


def _plain_connection(url: str):
    """A plain DB-API connection to the database of ``url`` (sqlite3, or psycopg for PostgreSQL)."""
    from sqlalchemy.engine import make_url

    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        return sqlite3.connect(parsed.database)
    import psycopg

    return psycopg.connect(parsed.set(drivername="postgresql").render_as_string(hide_password=False))


def child_load_floor(url: str) -> dict:
    """The floor of the analysis: the reading columns it reads, from the database into numpy arrays (on PostgreSQL
    through a server-side cursor, so the rows come in batches as from SQLite)."""
    import sqlalchemy.engine  # noqa: F401  (the modules _plain_connection uses load before the clock starts)

    if not url.startswith("sqlite"):
        import psycopg  # noqa: F401

    start_mb = _peak_mb()
    started = time.perf_counter()
    connection = _plain_connection(url)
    query = f"SELECT {', '.join(LOADED_COLUMNS)} FROM reading"
    if isinstance(connection, sqlite3.Connection):
        cursor = connection.execute(query)
    else:
        cursor = connection.cursor(name="load_floor")
        cursor.itersize = BATCH_ROWS
        cursor.execute(query)
    parts: list[list[np.ndarray]] = [[] for _ in LOADED_COLUMNS]
    while rows := cursor.fetchmany(BATCH_ROWS):
        for position, values in enumerate(zip(*rows, strict=True)):
            if LOADED_COLUMNS[position] == "taken_at":
                parts[position].append(np.array(values, dtype="datetime64[us]"))
            elif LOADED_COLUMNS[position] in ("id", "pump_id"):
                parts[position].append(np.array(values, dtype=np.int64))
            else:
                parts[position].append(np.array(values, dtype=float))  # NULL becomes NaN
    arrays = {name: np.concatenate(chunks) if chunks else np.empty(0) for name, chunks in
              zip(LOADED_COLUMNS, parts, strict=True)}
    seconds = time.perf_counter() - started
    connection.close()
    return {"seconds": seconds, "peak_mb": _peak_mb(), "start_mb": start_mb, "rows": int(len(arrays["id"]))}


def _in_child_env(workers: int) -> dict:
    return {**os.environ, "FLEET_ANALYSIS_WORKERS": str(workers)}


CHILDREN = {"analysis": child_analysis, "load_floor": child_load_floor}


def _in_child(name: str, argument: str, env: dict | None = None) -> dict:
    """Run CHILDREN[name](argument) in a fresh Python process (a clean peak-memory figure) and return its dict."""
    done = subprocess.run([sys.executable, "-m", "benchmarks.run", "--child", name, argument], cwd=ROOT,
                          capture_output=True, text=True, check=False, env=env)
    if done.returncode != 0:
        raise RuntimeError(f"benchmark step {name} failed:\n{done.stderr}")
    return json.loads(done.stdout.strip().splitlines()[-1])


# --- the measurements ----------------------------------------------------------------------------------------

def _import(sessions, kind: str, path: Path) -> int:
    """One file through the code path of `fleet import KIND FILE --no-analysis` (one transaction)."""
    from fleet.services.transfer.importing import import_file

    with sessions.begin() as session:
        return import_file(session, kind, path).created


def _floor_insert(source: Path, floor: Path, shared: bool = False) -> float:
    """Seconds plain sqlite3 executemany takes to insert every stored reading into ``floor``, one transaction, in
    the statements the import itself sends (fleet/services/transfer/bulk.py: SQLITE_ROWS_PER_STATEMENT rows to an
    INSERT, the last few one to a statement), as the PostgreSQL floor uses COPY as the import does. The rows are
    laid out for those statements before the clock starts: the floor is the database's share alone.

    Every column is a parameter of every row unless ``shared``: then, as the import sends a block, a column holding
    one value in every row of one import's rows (one ``created_at``) is bound once a statement, or written NULL
    when that value is missing (``bulk.insert_statement``)."""
    from fleet.services.transfer.bulk import SQLITE_ROWS_PER_STATEMENT as per

    reader = sqlite3.connect(source)
    writer = _sqlite_connect(floor)
    columns = ", ".join(READING_COLUMNS)
    row = f"({', '.join('?' * len(READING_COLUMNS))})"
    one = f"INSERT INTO reading ({columns}) VALUES {row}"
    many = f"INSERT INTO reading ({columns}) VALUES {', '.join([row] * per)}"
    cursor = reader.execute(f"SELECT {columns} FROM reading ORDER BY id")
    seconds = 0.0
    writer.execute("BEGIN")
    while rows := cursor.fetchmany(BATCH_ROWS):
        if shared:
            statements = _shared_statements(np.asarray(rows, dtype=object), per)
        else:
            whole = len(rows) // per * per
            grouped = np.asarray(rows[:whole], dtype=object).reshape(-1, per * len(READING_COLUMNS)).tolist()
            statements = [(many, grouped, one, rows[whole:])]
        started = time.perf_counter()
        for many_rows, grouped, one_row, rest in statements:
            writer.executemany(many_rows, grouped)
            writer.executemany(one_row, rest)
        seconds += time.perf_counter() - started
    started = time.perf_counter()
    writer.execute("COMMIT")
    seconds += time.perf_counter() - started
    writer.close()
    reader.close()
    return seconds


def _shared_statements(cells: np.ndarray, per: int) -> list[tuple[str, list, str, list]]:
    """The rows (``cells``, a row of READING_COLUMNS each) as the import sends a block: cut where ``created_at``
    changes (one import's rows), and in each part a column missing in every row written NULL, a column holding one
    value in every row bound once a statement, the others row by row (``bulk.insert_statement``); each part's
    INSERT of ``per`` rows with its parameter lists, and of one row with the last few rows'."""
    from fleet.services.transfer.bulk import NULL, ONCE, ROW, insert_statement

    made = cells[:, READING_COLUMNS.index("created_at")]
    cuts = [0] + [i for i in range(1, len(made)) if made[i] != made[i - 1]] + [len(made)]
    statements = []
    for start, stop in zip(cuts[:-1], cuts[1:], strict=True):
        part = cells[start:stop]
        shape = tuple(NULL if all(v is None for v in column) else ONCE if all(v == column[0] for v in column)
                      else ROW for column in part.T)
        own = [position for position, kind in enumerate(shape) if kind == ROW]
        once = [part[0, position] for position, kind in enumerate(shape) if kind == ONCE]
        whole = len(part) // per * per
        grouped = np.empty((whole // per, per * len(own) + len(once)), dtype=object)
        grouped[:, :per * len(own)] = part[:whole][:, own].reshape(whole // per, per * len(own))
        grouped[:, per * len(own):] = np.array(once, dtype=object)
        rest = [cells_of_row + once for cells_of_row in part[whole:][:, own].tolist()]
        statements.append((insert_statement("reading", list(READING_COLUMNS), shape, per), grouped.tolist(),
                           insert_statement("reading", list(READING_COLUMNS), shape, 1), rest))
    return statements


def copy_rows(connection, table: str, rows) -> None:
    """``rows`` (tuples of READING_COLUMNS) into ``table`` by a plain psycopg COPY: an import's PostgreSQL floor."""
    with connection.cursor() as cursor, cursor.copy(f"COPY {table} ({', '.join(READING_COLUMNS)}) FROM STDIN") as copy:
        for row in rows:
            copy.write_row(row)


def _floor_insert_server(url: str) -> float:
    """Seconds a plain psycopg COPY takes to insert every stored reading into a table made LIKE ``reading`` (same
    columns, defaults and indexes; no foreign keys), one transaction; the table is dropped after. COPY, as the
    import itself uses on PostgreSQL (fleet/services/transfer/bulk.py)."""
    columns = ", ".join(READING_COLUMNS)
    reader, writer = _plain_connection(url), _plain_connection(url)
    with writer.transaction():
        writer.execute("DROP TABLE IF EXISTS bench_floor_reading")
        writer.execute("CREATE TABLE bench_floor_reading (LIKE reading INCLUDING ALL)")
    cursor = reader.cursor(name="floor_rows")
    cursor.itersize = BATCH_ROWS
    cursor.execute(f"SELECT {columns} FROM reading ORDER BY id")
    seconds = 0.0
    with writer.transaction():
        while rows := cursor.fetchmany(BATCH_ROWS):
            started = time.perf_counter()
            copy_rows(writer, "bench_floor_reading", rows)
            seconds += time.perf_counter() - started
        started = time.perf_counter()
    seconds += time.perf_counter() - started  # the commit
    reader.close()
    with writer.transaction():
        writer.execute("DROP TABLE bench_floor_reading")
    writer.close()
    return seconds


def _require_empty(url: str) -> None:
    """The benchmark makes its own schema: a server database must hold no tables (nothing of anyone's is lost)."""
    from sqlalchemy import inspect

    from fleet.db.engine import make_engine

    engine = make_engine(url)
    tables = inspect(engine).get_table_names()
    engine.dispose()
    if tables:
        raise SystemExit(f"--database {engine.url.render_as_string()}: holds {len(tables)} table(s) "
                         f"({', '.join(sorted(tables)[:5])}...); the benchmark needs an empty database")


def _sign_in(app, client) -> dict:
    """Sign the test client in as an engineer and return the headers of an API token, where login exists."""
    if "auth.login" not in app.view_functions:
        return {}
    from sqlalchemy import select

    from fleet.db.models import User
    from fleet.services.users import create_token, create_user, start_session
    from fleet.web.auth import SignedInUser

    with app.extensions["fleet_db"].begin() as session:
        user = session.scalar(select(User).where(User.name == "bench-engineer"))
        if user is None:
            user = create_user(session, "bench-engineer", "engineer", "invented bench password")
        token = create_token(session, "bench-engineer", "benchmark")
        signed_in = SignedInUser.of(user, session_key=start_session(session, user.id))
    with client.session_transaction() as cookie:
        cookie["_user_id"] = signed_in.get_id()
        cookie["_fresh"] = True
    return {"Authorization": f"Bearer {token.secret}"}


def _median_ms(client, url: str, times: int) -> float:
    samples = []
    for _ in range(times):
        started = time.perf_counter()
        response = client.get(url)
        samples.append(1000.0 * (time.perf_counter() - started))
        if response.status_code != 200:
            raise RuntimeError(f"GET {url} answered {response.status_code}")
    return statistics.median(samples)


def _pages(url: str, serial: str) -> dict:
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": url, "TESTING": True})
    client = app.test_client()
    _sign_in(app, client)
    client.get("/")  # first request: template compilation, connection pool
    return {"service_list_ms": _median_ms(client, "/", 20), "pump_page_ms": _median_ms(client, f"/pumps/{serial}", 5)}


def _round_body(session, serial: str, at: pd.Timestamp) -> dict:
    """The next reading a round would take on ``serial`` at ``at``: its last reading's operating point and values,
    the hour meter moved on at the rate of its last two readings."""
    from sqlalchemy import select

    from fleet.db.models import Pump, Reading

    last, *before = session.execute(select(Reading).join(Pump).where(Pump.serial == serial)
                                    .order_by(Reading.taken_at.desc()).limit(2)).scalars().all()
    per_day = 24.0  # a pump with one reading: running all day since
    if before:
        per_day = (last.hours - before[0].hours) / max((last.taken_at - before[0].taken_at).total_seconds() / 86400.0,
                                                        1e-9)
    days = (at - pd.Timestamp(last.taken_at)).total_seconds() / 86400.0
    body = {"pump": serial, "taken_at": at.strftime("%Y-%m-%d %H:%M"), "hours": last.hours + max(per_day, 0.0) * days,
            "outlet_pressure": last.pressure_bar, "speed": last.speed_rpm, "oil_temp": last.temp_c}
    if last.flow_lpm is not None:
        body["outlet_flow"] = last.flow_lpm
    if last.drain_lpm is not None:
        body["case_drain_flow"] = last.drain_lpm
    return body


def _reading_visible(url: str, serials: list[str], after: pd.Timestamp, kind_refit: bool = False) -> dict:
    """Per pump: post one new reading to the API, then poll another session until its new analysis is stored.

    By default the reading is the next one of a round (_round_body). ``kind_refit``: the benchmark's earlier
    reading instead (60,000 h, 150 bar, 1,500 rpm, 40 L/min, 48 degC), an hour meter far beyond the pump's, which
    moves its kind's fleet life figures past the bound where they are refitted from every stored life of the kind
    (fleet.services.analysis.store) on every post: the slowest a single reading gets."""
    from sqlalchemy import select

    from fleet.db.models import AnalysisResult, Pump
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": url, "TESTING": True})
    client = app.test_client()
    headers = _sign_in(app, client)
    sessions = app.extensions["fleet_db"]
    samples = []
    for number, serial in enumerate(serials):
        at = after + pd.Timedelta(hours=number)
        with sessions() as session:
            before = session.scalar(select(AnalysisResult.computed_at).join(Pump).where(Pump.serial == serial))
            body = ({"pump": serial, "taken_at": at.strftime("%Y-%m-%d %H:%M"), "hours": 60_000 + number,
                     "outlet_pressure": 150.0, "speed": 1500, "outlet_flow": 40.0, "oil_temp": 48.0}
                    if kind_refit else _round_body(session, serial, at))
        started = time.perf_counter()
        response = client.post("/api/readings", json=body, headers=headers)
        if response.status_code != 201:
            raise RuntimeError(f"POST /api/readings answered {response.status_code}: {response.get_data(True)}")
        while True:
            with sessions() as session:
                now = session.scalar(select(AnalysisResult.computed_at).join(Pump).where(Pump.serial == serial))
            if now is not None and now != before:
                break
        samples.append(1000.0 * (time.perf_counter() - started))
    prefix = "refit_" if kind_refit else ""
    return {f"{prefix}reading_visible_ms": statistics.median(samples),
            f"{prefix}reading_visible_max_ms": max(samples)}


def _partial_refreshes(sessions, serials: list[str], machine: tuple[str, str], day: pd.Timestamp) -> dict:
    """An overhaul (resets an interval) and an oil sample, each imported and its pumps' analysis refreshed."""
    from fleet.services.analysis import refresh_analysis
    from fleet.services.transfer.importing import import_table

    def timed(kind: str, table: pd.DataFrame) -> float:
        started = time.perf_counter()
        with sessions.begin() as session:
            result = import_table(session, kind, table)
            refresh_analysis(session, pump_ids=sorted(result.pump_ids))
        return 1000.0 * (time.perf_counter() - started)

    event = pd.DataFrame({"pump": serials, "date": day.strftime("%Y-%m-%d"), "kind": "overhaul", "cost": "4000"})
    sample = pd.DataFrame({"site": [machine[0]], "machine": [machine[1]], "sampled_at": [day.strftime("%Y-%m-%d")],
                           "reported_at": [day.strftime("%Y-%m-%d")], "iso4406": ["18/16/13"], "water": ["150"]})
    return {"overhaul_refresh_ms": timed("events", event), "sample_refresh_ms": timed("samples", sample)}


def run(size_name: str, work: Path, database: str | None = None, workers: int | None = None) -> dict:
    from fleet.db import migrate
    from fleet.db.engine import make_engine, make_session_factory
    from fleet.services.register.records import ensure_limit_defaults

    size = SIZES[size_name]
    from fleet.services.analysis.parallel import worker_count

    figures: dict = {"size": size_name, "pumps": size.pumps, "readings_per_pump": size.readings_per_pump,
                     "database": "postgresql" if database else "sqlite", "workers": worker_count(workers),
                     "load_average_start": list(os.getloadavg())}
    if database:
        _require_empty(database)
    figures.update(startup.measure())  # first, while the machine is quiet
    started = time.perf_counter()
    files = write_fleet(work / "csv", size)
    figures["generate_s"] = time.perf_counter() - started
    figures["readings"] = files.n_readings

    path = work / "fleet.sqlite"
    url = database or f"sqlite:///{path}"
    engine = make_engine(url)
    migrate.upgrade(engine)
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        ensure_limit_defaults(session)
    started = time.perf_counter()
    _import(sessions, "sites", files.sites)
    _import(sessions, "pumps", files.pumps)
    figures["register_import_s"] = time.perf_counter() - started

    engine.dispose()
    floor_path = work / "floor.sqlite"
    if not database:
        _checkpoint(path)
        shutil.copyfile(path, floor_path)  # the same schema, pumps and pragmas, no readings yet

    engine = make_engine(url)
    sessions = make_session_factory(engine)
    started = time.perf_counter()
    imported = sum(_import(sessions, "readings", p) for p in files.readings)
    figures["import_s"] = time.perf_counter() - started
    assert imported == files.n_readings, (imported, files.n_readings)
    started = time.perf_counter()
    _import(sessions, "events", files.events)
    _import(sessions, "samples", files.samples)
    figures["events_samples_import_s"] = time.perf_counter() - started
    engine.dispose()
    if database:
        figures["import_floor_s"] = _floor_insert_server(database)
    else:
        _checkpoint(path)
        figures["import_floor_s"] = _floor_insert(path, floor_path)
    figures["import_rows_per_s"] = files.n_readings / figures["import_s"]
    figures["import_floor_rows_per_s"] = files.n_readings / figures["import_floor_s"]
    figures["import_ratio"] = figures["import_s"] / figures["import_floor_s"]
    for leftover in (floor_path, Path(f"{floor_path}-wal"), Path(f"{floor_path}-shm")):
        leftover.unlink(missing_ok=True)

    analysis = _in_child("analysis", url, _in_child_env(figures["workers"]))
    load = _in_child("load_floor", url)
    figures.update({"analysis_s": analysis["seconds"], "analysis_peak_mb": analysis["peak_mb"],
                    "analysis_own_peak_mb": analysis["own_peak_mb"], "analysis_compute_s": analysis["compute_s"],
                    "analysis_peak_rss_sum_mb": analysis["peak_rss_sum_mb"],
                    "analysis_worker_peak_mb": analysis["worker_peak_mb"],
                    "analysis_worker_processes": analysis["worker_processes"],
                    "analysis_workers_forked": analysis["forked"],
                    "analysis_start_mb": analysis["start_mb"], "analysis_by_status": analysis["by_status"],
                    "analysis_pumps": analysis["pumps"], "load_floor_rows": load["rows"],
                    "load_floor_s": load["seconds"], "load_floor_peak_mb": load["peak_mb"],
                    "analysis_ratio": analysis["seconds"] / load["seconds"]})

    serials = pd.read_csv(files.pumps, usecols=["pump", "site", "machine"])
    figures.update(_pages(url, str(serials["pump"].iloc[0])))
    after = files.last_reading_at + pd.Timedelta(days=2)
    picks = serials["pump"].iloc[np.linspace(0, len(serials) - 1, 10).astype(int)].tolist()
    figures.update(_reading_visible(url, picks, after))
    # Other pumps for the refit case: a pump's second post would follow the first one's 60,000 h.
    refit_picks = serials["pump"].iloc[np.linspace(1, len(serials) - 2, 10).astype(int)].tolist()
    figures.update(_reading_visible(url, refit_picks, after + pd.Timedelta(days=1), kind_refit=True))
    engine = make_engine(url)
    sessions = make_session_factory(engine)
    figures.update(_partial_refreshes(sessions, picks[:1], tuple(serials[["site", "machine"]].iloc[-1]),
                                      after + pd.Timedelta(days=1)))
    engine.dispose()
    figures["load_average_end"] = list(os.getloadavg())
    figures["targets"] = TARGETS
    figures["met"] = {name: bool(figures[name] <= limit) for name, limit in TARGETS.items()}
    return figures


def table(figures: dict) -> str:
    """The figures as the README's table rows."""
    rows = [
        ("database, workers, load average at start / end", figures["database"], f"{figures['workers']} worker(s)",
         " ".join(f"{v:.2f}" for v in figures["load_average_start"]) + " / "
         + " ".join(f"{v:.2f}" for v in figures["load_average_end"])),
        ("readings import", f"{figures['import_s']:.1f} s ({figures['import_rows_per_s']:,.0f} rows/s)",
         f"{'COPY' if figures['database'] != 'sqlite' else 'executemany'} floor {figures['import_floor_s']:.1f} s",
         f"{figures['import_ratio']:.2f} x (target <= {TARGETS['import_ratio']})"),
        ("full analysis", f"{figures['analysis_s']:.1f} s (the last part computed at "
                          f"{figures['analysis_compute_s']:.1f} s)",
         f"load floor {figures['load_floor_s']:.1f} s",
         f"{figures['analysis_ratio']:.2f} x (target <= {TARGETS['analysis_ratio']}, < 60 s)"),
        ("analysis peak memory, PSS of all its processes at once", f"{figures['analysis_peak_mb']:,.0f} MB",
         f"RSS summed "
         f"{figures['analysis_peak_rss_sum_mb']:,.0f} MB; main's own peak {figures['analysis_own_peak_mb']:,.0f} MB, "
         f"a worker's "
         f"{figures['analysis_worker_peak_mb']:,.0f} MB ({figures['analysis_worker_processes']} worker processes, "
         f"{'forked from it' if figures['analysis_workers_forked'] else 'from the fork server'})",
         f"target <= {TARGETS['analysis_peak_mb']:,.0f} MB"),
        ("service list page, median of 20", f"{figures['service_list_ms']:.0f} ms", "",
         f"target <= {TARGETS['service_list_ms']:.0f} ms"),
        ("pump page, 5 years of readings", f"{figures['pump_page_ms']:.0f} ms", "",
         f"target <= {TARGETS['pump_page_ms']:.0f} ms"),
        ("new reading (a round's) -> analysis visible, median of 10", f"{figures['reading_visible_ms']:.0f} ms "
         f"(max {figures['reading_visible_max_ms']:.0f})", "", f"target <= {TARGETS['reading_visible_ms']:.0f} ms"),
        ("a reading that refits its kind (60,000 h) -> visible", f"{figures['refit_reading_visible_ms']:.0f} ms "
         f"(max {figures['refit_reading_visible_max_ms']:.0f})", "", ""),
        ("overhaul imported -> refreshed", f"{figures['overhaul_refresh_ms']:.0f} ms", "", ""),
        ("oil sample imported -> refreshed", f"{figures['sample_refresh_ms']:.0f} ms", "", ""),
        (f"command line start (`fleet --help`), median of {figures['help_runs']}", f"{figures['help_ms']:.0f} ms",
         f"python + click {figures['help_floor_ms']:.0f} ms", "target <= 300 ms"),
    ]
    lines = ["| measure | fleet | floor | ratio / target |", "| --- | --- | --- | --- |"]
    lines += [f"| {a} | {b} | {c} | {d} |" for a, b, c, d in rows]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> dict | None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", choices=sorted(SIZES), default="small")
    parser.add_argument("--out", type=Path, help="write the figures as JSON here")
    parser.add_argument("--work", type=Path, help="folder for the CSV files and databases (default: a temporary one)")
    parser.add_argument("--database", metavar="URL",
                        help="an empty PostgreSQL database to run on (default: a SQLite file in --work)")
    parser.add_argument("--workers", type=int, help="processes for the full analysis (default: "
                        "$FLEET_ANALYSIS_WORKERS, else one per CPU core)")
    parser.add_argument("--child", nargs=2, metavar=("STEP", "ARG"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(CHILDREN[args.child[0]](args.child[1])))
        return None
    if args.work:
        args.work.mkdir(parents=True, exist_ok=True)
        figures = run(args.size, args.work, args.database, args.workers)
    else:
        with tempfile.TemporaryDirectory(prefix="fleet-bench-") as folder:
            figures = run(args.size, Path(folder), args.database, args.workers)
    if args.out:
        args.out.write_text(json.dumps(figures, indent=2) + "\n")
    print(table(figures))
    return figures


if __name__ == "__main__":
    main()
