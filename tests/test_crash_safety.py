"""An import killed midway through its write leaves the database exactly as it was."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sqlalchemy import inspect, select, text

from fleet.db.base import Base
from fleet.db.models import Pump

ROWS = 300_000
ROOT = Path(__file__).resolve().parents[1]


def _table_counts(engine) -> dict[str, int]:
    names = sorted(set(Base.metadata.tables) & set(inspect(engine).get_table_names()))
    with engine.connect() as connection:
        return {name: connection.execute(text(f'SELECT count(*) FROM "{name}"')).scalar() for name in names}


def _big_readings_csv(path: Path, serials: list[str]) -> None:
    """ROWS plausible readings of the demo pumps, each at its own minute in 2001 (before any demo reading)."""
    n = np.arange(ROWS)
    start = pd.Timestamp("2001-01-01")
    frame = pd.DataFrame({
        "pump": np.array(serials)[n % len(serials)],
        "taken_at": (start + pd.to_timedelta(n // len(serials), unit="min")).strftime("%Y-%m-%d %H:%M"),
        "hours": 10 + n // len(serials) / 60,
        "outlet_pressure": 150.0, "speed": 1480.0, "outlet_flow": 40.0, "oil_temp": 48.0,
        "note": "invented bulk reading for the crash test",
    })
    frame.to_csv(path, index=False)


@pytest.mark.slow
def test_an_import_killed_midway_through_its_write_leaves_the_database_as_it_was(demo_db, tmp_path):
    if not demo_db.url.startswith("sqlite"):
        pytest.skip("watches SQLite's write-ahead log to kill the import mid-write")
    with demo_db.sessions() as session:
        serials = list(session.scalars(select(Pump.serial)))
    before = _table_counts(demo_db.engine)
    demo_db.engine.dispose()
    big = tmp_path / "BIG.csv"
    _big_readings_csv(big, serials)
    database = Path(demo_db.url.removeprefix("sqlite:///"))
    wal = database.with_name(database.name + "-wal")
    wal_at_start = wal.stat().st_size if wal.exists() else 0

    process = subprocess.Popen([sys.executable, "-m", "fleet", "--database", demo_db.url, "import", "readings",
                                str(big), "--no-analysis"], cwd=ROOT, stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE)
    deadline = time.monotonic() + 240
    written = 0
    # The insert spills uncommitted pages into the WAL as it goes: once a few MB are there it is mid-write.
    while process.poll() is None and time.monotonic() < deadline:
        written = (wal.stat().st_size if wal.exists() else 0) - wal_at_start
        if written > 4_000_000:
            os.kill(process.pid, signal.SIGKILL)
            break
        time.sleep(0.005)
    process.wait(timeout=60)
    stdout, stderr = process.communicate()
    assert process.returncode == -signal.SIGKILL, (
        f"the import ended by itself before it could be killed mid-write: {stdout!r} {stderr!r}")
    print(f"\nkilled the import of {ROWS} readings with {written / 1e6:.1f} MB of its write in the WAL")

    assert _table_counts(demo_db.engine) == before
    with demo_db.engine.connect() as connection:
        assert connection.exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"
        assert connection.exec_driver_sql("PRAGMA foreign_key_check").fetchall() == []
