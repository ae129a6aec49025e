"""The readings import against its floor, alone: on SQLite (plain sqlite3 executemany, in the import's own INSERT
statements) and, given a server, on PostgreSQL (a plain COPY of the same rows into the same table). Quicker than
the whole benchmark when only the import changed; ``benchmarks.run`` measures SQLite's the same way.

    python3 -m benchmarks.import_floors --size medium
    python3 -m benchmarks.import_floors --size medium --database postgresql+psycopg://postgres@127.0.0.1:5432/bench
    python3 -m benchmarks.import_floors --size medium --repeat 3    # three pairs, floor and import in turn
    python3 -m benchmarks.import_floors --size medium --repeat 3 --shared-floor

``--shared-floor`` also times, in each pair right after the floor, a floor that sends the statements as the import
now shapes them (``benchmarks.run._floor_insert(shared=True)``: a column holding one value in all of an import's
rows bound once a statement, or written NULL when missing), and reports the import against it as well
(``import_shared_ratios``, ``import_shared_median_ratio``): the plain floor binds every cell, the import no longer.

On SQLite the floor and the import take turns (floor, import, floor, import, ...), each into its own fresh copy of
the same registered database, made and flushed to disk the same way just before it is timed; an import first, not
timed, warms the files and libraries and stores the rows every floor run inserts. Each pair's ratio is its import
over the floor timed just before it, and ``import_median_ratio`` is their median: a floor that moves with the
machine's load is compared with an import run under the same load.

The PostgreSQL database named is emptied and rebuilt through the migrations; a second database, ``<name>_floor``,
is made from it as a template just before the readings are imported (the same schema, pumps and indexes) and
dropped at the end.
"""

import argparse
import json
import os
import shutil
import statistics
import tempfile
import time
from pathlib import Path

from benchmarks.synthetic import SIZES, FleetFiles, write_fleet

READING_COLUMNS = ("pump_id", "taken_at", "hours", "pressure_bar", "speed_rpm", "flow_lpm", "drain_lpm", "temp_c",
                   "stroke", "taken_by", "note", "source", "created_at")


def _register(url: str, files: FleetFiles):
    """A database at the schema's head holding the fleet's sites and pumps; its engine and sessions."""
    from fleet.db import migrate
    from fleet.db.engine import make_engine, make_session_factory
    from fleet.services.register.records import ensure_limit_defaults
    from fleet.services.transfer.importing import import_file

    engine = make_engine(url)
    migrate.upgrade(engine)
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        ensure_limit_defaults(session)
    for kind, path in (("sites", files.sites), ("pumps", files.pumps)):
        with sessions.begin() as session:
            import_file(session, kind, path)
    return engine, sessions


def _import_readings(sessions, files: FleetFiles) -> float:
    """Seconds the readings take through the code path of `fleet import readings FILE --no-analysis`."""
    from fleet.services.transfer.importing import import_file

    started = time.perf_counter()
    created = 0
    for path in files.readings:
        with sessions.begin() as session:
            created += import_file(session, "readings", path).created
    seconds = time.perf_counter() - started
    assert created == files.n_readings, (created, files.n_readings)
    return seconds


def _figures(name: str, seconds: float, floor_s: float, rows: int) -> dict:
    return {f"{name}_s": seconds, f"{name}_floor_s": floor_s, f"{name}_ratio": seconds / floor_s,
            f"{name}_rows_per_s": rows / seconds}


def _fresh_copy(base: Path, path: Path) -> None:
    """``path`` as a copy of ``base``, written out to disk before anything is timed on it."""
    _remove(path)
    shutil.copyfile(base, path)
    os.sync()


def _remove(path: Path) -> None:
    for suffix in ("", "-wal", "-shm"):
        Path(f"{path}{suffix}").unlink(missing_ok=True)


def _timed_import(path: Path, files: FleetFiles) -> float:
    from benchmarks.run import _checkpoint
    from fleet.db.engine import make_engine, make_session_factory

    engine = make_engine(f"sqlite:///{path}")
    seconds = _import_readings(make_session_factory(engine), files)
    engine.dispose()
    _checkpoint(path)
    return seconds


def sqlite_imports(work: Path, files: FleetFiles, repeat: int = 1, shared: bool = False) -> list[dict]:
    """``repeat`` pairs, each the executemany floor and then the import, taking turns on fresh copies of one
    registered database; the rows the floor inserts come from an import run first (warm-up, not timed)."""
    from benchmarks.run import _checkpoint, _floor_insert

    base, source = work / "registered.sqlite", work / "imported.sqlite"
    engine, _sessions = _register(f"sqlite:///{base}", files)
    engine.dispose()
    _checkpoint(base)
    _fresh_copy(base, source)
    _timed_import(source, files)
    runs = []
    for _ in range(repeat):
        floor = work / "floor.sqlite"
        _fresh_copy(base, floor)
        floor_s = _floor_insert(source, floor)
        _remove(floor)
        if shared:
            _fresh_copy(base, floor)
            shared_s = _floor_insert(source, floor, shared=True)
            _remove(floor)
        imported = work / "import.sqlite"
        _fresh_copy(base, imported)
        seconds = _timed_import(imported, files)
        _remove(imported)
        runs.append(_figures("import", seconds, floor_s, files.n_readings))
        if shared:
            runs[-1].update(_figures("import_shared", seconds, shared_s, files.n_readings))
    for leftover in (base, source):
        _remove(leftover)
    return runs


def _server(url: str):
    """A psycopg connection to the server's maintenance database (CREATE and DROP DATABASE), autocommit."""
    import psycopg
    from sqlalchemy.engine import make_url

    parts = make_url(url)
    return psycopg.connect(host=parts.host, port=parts.port, user=parts.username, password=parts.password,
                           dbname="postgres", autocommit=True), parts


def postgres_import(url: str, files: FleetFiles) -> dict:
    """The import on PostgreSQL (through COPY) against a plain COPY of the stored rows into a copy of the database
    taken just before the import, each in one transaction."""
    import psycopg

    from benchmarks.run import copy_rows
    from fleet.db import migrate
    from fleet.db.engine import make_engine

    admin, parts = _server(url)
    floor_name = f"{parts.database}_floor"
    engine = make_engine(url)
    migrate.downgrade_to_empty(engine)
    with engine.begin() as connection:
        connection.exec_driver_sql("DROP TABLE IF EXISTS alembic_version")
    engine.dispose()
    engine, sessions = _register(url, files)
    engine.dispose()
    admin.execute(f'DROP DATABASE IF EXISTS "{floor_name}"')
    admin.execute(f'CREATE DATABASE "{floor_name}" TEMPLATE "{parts.database}"')
    try:
        seconds = _import_readings(sessions, files)
        engine.dispose()
        columns = ", ".join(READING_COLUMNS)
        plain = dict(host=parts.host, port=parts.port, user=parts.username, password=parts.password)
        with psycopg.connect(dbname=parts.database, **plain) as source:
            rows = source.execute(f"SELECT {columns} FROM reading ORDER BY id").fetchall()
        with psycopg.connect(dbname=floor_name, **plain) as floor:
            started = time.perf_counter()
            copy_rows(floor, "reading", rows)
            floor.commit()
            floor_s = time.perf_counter() - started
    finally:
        admin.execute(f'DROP DATABASE IF EXISTS "{floor_name}"')
        admin.close()
    return _figures("pg_import", seconds, floor_s, files.n_readings)


def _summary(runs: list[dict], name: str, rows: int) -> dict:
    """The quickest import against the quickest floor among ``runs`` (the fields kept from before), every pair's
    times and ratio in the order they ran, and the median of the pairs' ratios."""
    figures = _figures(name, min(r[f"{name}_s"] for r in runs), min(r[f"{name}_floor_s"] for r in runs), rows)
    if len(runs) > 1:
        figures[f"{name}_runs"] = [[r[f"{name}_s"], r[f"{name}_floor_s"]] for r in runs]
    figures[f"{name}_ratios"] = [r[f"{name}_ratio"] for r in runs]
    figures[f"{name}_median_ratio"] = statistics.median(figures[f"{name}_ratios"])
    return figures


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", choices=sorted(SIZES), default="small")
    parser.add_argument("--database", help="a PostgreSQL URL to measure on as well (the database is emptied)")
    parser.add_argument("--out", type=Path, help="write the figures as JSON here")
    parser.add_argument("--repeat", type=int, default=1,
                        help="measure N pairs of floor and import, taking turns, and report each pair's ratio "
                             "and their median (other jobs on the machine slow single runs by chance)")
    parser.add_argument("--shared-floor", action="store_true",
                        help="also time a floor whose statements bind a column holding one value in every row once "
                             "(as the import's do) and report the import against it")
    args = parser.parse_args(argv)
    figures: dict = {"size": args.size, "load_average": os.getloadavg()}
    with tempfile.TemporaryDirectory(prefix="fleet-import-") as folder:
        files = write_fleet(Path(folder) / "csv", SIZES[args.size])
        figures["readings"] = files.n_readings
        runs = sqlite_imports(Path(folder), files, args.repeat, args.shared_floor)
        figures.update(_summary(runs, "import", files.n_readings))
        if args.shared_floor:
            figures.update(_summary(runs, "import_shared", files.n_readings))
        if args.database:
            runs = [postgres_import(args.database, files) for _ in range(args.repeat)]
            figures.update(_summary(runs, "pg_import", files.n_readings))
    figures["load_average_after"] = os.getloadavg()
    if args.out:
        args.out.write_text(json.dumps(figures, indent=2) + "\n")
    print(json.dumps(figures, indent=2))
    return figures


if __name__ == "__main__":
    main()
