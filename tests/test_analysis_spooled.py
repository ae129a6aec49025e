"""A full analysis stored part by part from its files stores what the one-piece store stores, all or nothing.

The reference is the project's own one-piece path (compute the fleet in memory, then store.store); the figures
themselves are checked against outside sources in the tests of fleet/trend. SQLite, or PostgreSQL when
FLEET_TEST_DATABASE_URL is set. The demo plant's 41 pumps are cut into parts of 7, so several parts are stored.
"""

import datetime as dt
import gc
import weakref

import pytest
from sqlalchemy import select

from fleet.db.models import (
    AnalysisResult,
    FleetPrior,
    ForecastSnapshot,
    IntervalTrend,
    OutboxMail,
    ServiceLife,
    StatusChange,
)
from fleet.services.analysis import compute as compute_module
from fleet.services.analysis import refresh_analysis, spool, store_fleet
from fleet.services.analysis.compute import compute
from fleet.services.analysis.refresh import reanalyse
from fleet.services.analysis.store import store
from tests.frame_compare import plain as _plain

NOW = dt.datetime(2026, 12, 1, 12)
PART = 7
# Every stored row a full analysis writes, in a fixed order, without the ids the database hands out.
TABLES = {
    AnalysisResult: (AnalysisResult.pump_id,),
    IntervalTrend: (IntervalTrend.pump_id, IntervalTrend.interval_no),
    ServiceLife: (ServiceLife.pump_id, ServiceLife.interval_no),
    FleetPrior: (FleetPrior.kind,),
    ForecastSnapshot: (ForecastSnapshot.pump_id, ForecastSnapshot.made_at),
    StatusChange: (StatusChange.pump_id, StatusChange.at),
    OutboxMail: (OutboxMail.user_id, OutboxMail.pump_id),
}


def _rows(session) -> dict[str, list[dict]]:
    out = {}
    for model, order in TABLES.items():
        columns = [c for c in model.__table__.columns if c.name != "id"]
        out[model.__tablename__] = [dict(zip([c.name for c in columns], row, strict=True))
                                    for row in session.execute(select(*columns).order_by(*order))]
    return out


def _same_rows(expected: dict, got: dict) -> None:
    for table, rows in expected.items():
        assert len(got[table]) == len(rows), table
        for before, after in zip(rows, got[table], strict=True):
            assert {k: _plain(v) for k, v in after.items()} == {k: _plain(v) for k, v in before.items()}, table


@pytest.fixture
def small_parts(monkeypatch):
    monkeypatch.setattr(compute_module, "CHUNK_PUMPS", PART)


def test_stored_part_by_part_equals_stored_in_one_piece(demo_db, small_parts):
    with demo_db.sessions() as session:
        with session.begin():  # the one-piece path, rolled back after
            one_piece = store(session, compute(session, None, NOW))
            expected = _rows(session)
            session.rollback()
        with session.begin():
            spooled = refresh_analysis(session, None, NOW)
            got = _rows(session)
    assert len(expected["analysis_result"]) == 41 and len(expected["interval_trend"]) > 41
    assert len(expected["forecast_snapshot"]) > 0 and len(expected["status_change"]) > 0
    _same_rows(expected, got)
    assert (spooled.pumps, spooled.by_status, spooled.full) == (one_piece.pumps, one_piece.by_status, True)


def test_one_part_in_memory_at_a_time_and_the_files_removed(demo_db, small_parts, monkeypatch, tmp_path):
    spooled = tmp_path / "spool"
    spooled.mkdir()
    monkeypatch.setattr("tempfile.tempdir", str(spooled))  # where the run's part files go
    alive, reads = [], []
    read = spool.read_part

    def watched(path):
        gc.collect()
        reads.append(sum(ref() is not None for ref in alive))  # parts still in memory as the next is read
        part = read(path)
        alive.append(weakref.ref(part.results))
        return part

    monkeypatch.setattr(store_fleet, "read_part", watched)
    with demo_db.sessions() as session, session.begin():
        summary = refresh_analysis(session, None, NOW)
    assert summary.pumps == 41 and len(reads) == 6  # 41 pumps in parts of 7
    assert reads == [0] * 6
    assert list(spooled.iterdir()) == []  # the part files went with their folder


def test_a_part_failing_to_store_leaves_the_stored_analysis_as_it_was(demo_db, small_parts, monkeypatch):
    with demo_db.sessions() as session:
        before = _rows(session)
    read, calls = spool.read_part, []

    def failing_third(path):
        calls.append(path)
        if len(calls) == 3:
            raise OSError(f"{path}: disk gone")
        return read(path)

    monkeypatch.setattr(store_fleet, "read_part", failing_third)
    with pytest.raises(OSError, match="disk gone"):
        reanalyse(demo_db.sessions, now=NOW, workers=1)
    with demo_db.sessions() as session:
        _same_rows(before, _rows(session))  # the two parts stored before it are not kept either
