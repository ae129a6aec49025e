"""Benchmark fleet at scale against the machine's own floor (run by hand; CI runs the small size once).

    python3 -m benchmarks.run --size full --out benchmarks/full.json

Builds an invented fleet (benchmarks/synthetic.py) as CSV files, imports it through the code path of
`fleet import`, and measures, side by side in one run:

- CSV import of the readings against plain sqlite3 executemany of the same rows into the same table, in one
  transaction, on a copy of the database taken just before the import (same schema, pragmas and pumps);
- the full-fleet analysis (`fleet analyze`: load, analyse, store) against loading the same reading columns from the
  database into numpy arrays; each in its own process, which also reports its peak memory;
- the service list page (median of 20) and a pump page with five years of readings, through the Flask test client;
- a new reading posted to POST /api/readings until its pump's refreshed analysis is visible to another session;
- an overhaul and an oil sample imported, until the touched pumps' analysis is stored;
- the start of the command line, `fleet --help`, against the interpreter starting with click (benchmarks/startup.py).
"""

import argparse
import json
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
    "import_ratio": 1.2, "analysis_ratio": 3.0, "analysis_s": 60.0, "analysis_peak_mb": 2048.0,
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
    """The full refresh `fleet analyze` runs: load every frame, analyse, store the results; one transaction."""
    from fleet.db.engine import make_engine, make_session_factory
    from fleet.services.analysis import refresh_analysis

    engine = make_engine(url)
    sessions = make_session_factory(engine)
    start_mb = _peak_mb()
    started = time.perf_counter()
    with sessions.begin() as session:
        summary = refresh_analysis(session, None)
    seconds = time.perf_counter() - started
    engine.dispose()
    return {"seconds": seconds, "peak_mb": _peak_mb(), "start_mb": start_mb, "pumps": summary.pumps,
            "by_status": summary.by_status}


def child_load_floor(path: str) -> dict:
    """The floor of the analysis: the reading columns it reads, from the database into numpy arrays."""
    start_mb = _peak_mb()
    started = time.perf_counter()
    connection = sqlite3.connect(path)
    cursor = connection.execute(f"SELECT {', '.join(LOADED_COLUMNS)} FROM reading")
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


CHILDREN = {"analysis": child_analysis, "load_floor": child_load_floor}


def _in_child(name: str, argument: str) -> dict:
    """Run CHILDREN[name](argument) in a fresh Python process (a clean peak-memory figure) and return its dict."""
    done = subprocess.run([sys.executable, "-m", "benchmarks.run", "--child", name, argument], cwd=ROOT,
                          capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"benchmark step {name} failed:\n{done.stderr}")
    return json.loads(done.stdout.strip().splitlines()[-1])


# --- the measurements ----------------------------------------------------------------------------------------

def _import(sessions, kind: str, path: Path) -> int:
    """One file through the code path of `fleet import KIND FILE --no-analysis` (one transaction)."""
    from fleet.services.transfer.importing import import_file

    with sessions.begin() as session:
        return import_file(session, kind, path).created


def _floor_insert(source: Path, floor: Path) -> float:
    """Seconds plain sqlite3 executemany takes to insert every stored reading into ``floor``, one transaction."""
    reader = sqlite3.connect(source)
    writer = _sqlite_connect(floor)
    columns = ", ".join(READING_COLUMNS)
    statement = f"INSERT INTO reading ({columns}) VALUES ({', '.join('?' * len(READING_COLUMNS))})"
    cursor = reader.execute(f"SELECT {columns} FROM reading ORDER BY id")
    seconds = 0.0
    writer.execute("BEGIN")
    while rows := cursor.fetchmany(BATCH_ROWS):
        started = time.perf_counter()
        writer.executemany(statement, rows)
        seconds += time.perf_counter() - started
    started = time.perf_counter()
    writer.execute("COMMIT")
    seconds += time.perf_counter() - started
    writer.close()
    reader.close()
    return seconds


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


def _reading_visible(url: str, serials: list[str], after: pd.Timestamp) -> dict:
    """Per pump: post one new reading to the API, then poll another session until its new analysis is stored."""
    from sqlalchemy import select

    from fleet.db.models import AnalysisResult, Pump
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": url, "TESTING": True})
    client = app.test_client()
    headers = _sign_in(app, client)
    sessions = app.extensions["fleet_db"]
    samples = []
    for number, serial in enumerate(serials):
        with sessions() as session:
            before = session.scalar(select(AnalysisResult.computed_at).join(Pump).where(Pump.serial == serial))
        body = {"pump": serial, "taken_at": (after + pd.Timedelta(hours=number)).strftime("%Y-%m-%d %H:%M"),
                "hours": 60_000 + number, "outlet_pressure": 150.0, "speed": 1500, "outlet_flow": 40.0,
                "oil_temp": 48.0}
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
    return {"reading_visible_ms": statistics.median(samples), "reading_visible_max_ms": max(samples)}


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


def run(size_name: str, work: Path) -> dict:
    from fleet.db import migrate
    from fleet.db.engine import make_engine, make_session_factory
    from fleet.services.register.records import ensure_limit_defaults

    size = SIZES[size_name]
    figures: dict = {"size": size_name, "pumps": size.pumps, "readings_per_pump": size.readings_per_pump}
    figures.update(startup.measure())  # first, while the machine is quiet
    started = time.perf_counter()
    files = write_fleet(work / "csv", size)
    figures["generate_s"] = time.perf_counter() - started
    figures["readings"] = files.n_readings

    path = work / "fleet.sqlite"
    url = f"sqlite:///{path}"
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
    _checkpoint(path)
    floor_path = work / "floor.sqlite"
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
    _checkpoint(path)

    figures["import_floor_s"] = _floor_insert(path, floor_path)
    figures["import_rows_per_s"] = files.n_readings / figures["import_s"]
    figures["import_floor_rows_per_s"] = files.n_readings / figures["import_floor_s"]
    figures["import_ratio"] = figures["import_s"] / figures["import_floor_s"]
    floor_path.unlink()
    for suffix in ("-wal", "-shm"):
        Path(f"{floor_path}{suffix}").unlink(missing_ok=True)

    analysis = _in_child("analysis", url)
    load = _in_child("load_floor", str(path))
    figures.update({"analysis_s": analysis["seconds"], "analysis_peak_mb": analysis["peak_mb"],
                    "analysis_start_mb": analysis["start_mb"], "analysis_by_status": analysis["by_status"],
                    "analysis_pumps": analysis["pumps"], "load_floor_rows": load["rows"],
                    "load_floor_s": load["seconds"], "load_floor_peak_mb": load["peak_mb"],
                    "analysis_ratio": analysis["seconds"] / load["seconds"]})

    serials = pd.read_csv(files.pumps, usecols=["pump", "site", "machine"])
    figures.update(_pages(url, str(serials["pump"].iloc[0])))
    after = files.last_reading_at + pd.Timedelta(days=2)
    picks = serials["pump"].iloc[np.linspace(0, len(serials) - 1, 10).astype(int)].tolist()
    figures.update(_reading_visible(url, picks, after))
    engine = make_engine(url)
    sessions = make_session_factory(engine)
    figures.update(_partial_refreshes(sessions, picks[:1], tuple(serials[["site", "machine"]].iloc[-1]),
                                      after + pd.Timedelta(days=1)))
    engine.dispose()
    figures["targets"] = TARGETS
    figures["met"] = {name: bool(figures[name] <= limit) for name, limit in TARGETS.items()}
    return figures


def table(figures: dict) -> str:
    """The figures as the README's table rows."""
    rows = [
        ("readings import", f"{figures['import_s']:.1f} s ({figures['import_rows_per_s']:,.0f} rows/s)",
         f"executemany floor {figures['import_floor_s']:.1f} s",
         f"{figures['import_ratio']:.2f} x (target <= {TARGETS['import_ratio']})"),
        ("full analysis", f"{figures['analysis_s']:.1f} s", f"load floor {figures['load_floor_s']:.1f} s",
         f"{figures['analysis_ratio']:.2f} x (target <= 3, < 60 s)"),
        ("analysis peak memory", f"{figures['analysis_peak_mb']:,.0f} MB", "", "target <= 2048 MB"),
        ("service list page, median of 20", f"{figures['service_list_ms']:.0f} ms", "",
         f"target <= {TARGETS['service_list_ms']:.0f} ms"),
        ("pump page, 5 years of readings", f"{figures['pump_page_ms']:.0f} ms", "",
         f"target <= {TARGETS['pump_page_ms']:.0f} ms"),
        ("new reading -> analysis visible", f"{figures['reading_visible_ms']:.0f} ms "
         f"(max {figures['reading_visible_max_ms']:.0f})", "", f"target <= {TARGETS['reading_visible_ms']:.0f} ms"),
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
    parser.add_argument("--child", nargs=2, metavar=("STEP", "ARG"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(CHILDREN[args.child[0]](args.child[1])))
        return None
    if args.work:
        args.work.mkdir(parents=True, exist_ok=True)
        figures = run(args.size, args.work)
    else:
        with tempfile.TemporaryDirectory(prefix="fleet-bench-") as folder:
            figures = run(args.size, Path(folder))
    if args.out:
        args.out.write_text(json.dumps(figures, indent=2) + "\n")
    print(table(figures))
    return figures


if __name__ == "__main__":
    main()
