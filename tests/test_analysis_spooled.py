"""A full analysis stored part by part from its files stores what the one-piece store stores, all or nothing.

The reference is the project's own one-piece path (compute the fleet in memory, then store.store); the figures
themselves are checked against outside sources in the tests of fleet/trend. SQLite, or PostgreSQL when
FLEET_TEST_DATABASE_URL is set. The demo plant's 41 pumps are cut into parts of 7, so several parts are stored.
"""

import datetime as dt
import gc
import json
import math
import struct
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
from fleet.jsonvalues import json_ready
from fleet.services.analysis import compute as compute_module
from fleet.services.analysis import refresh_analysis, spool, store_fleet
from fleet.services.analysis.compute import compute
from fleet.services.analysis.refresh import reanalyse
from fleet.services.analysis.store import NOT_IN_DETAIL, store
from fleet.trend.settings import AnalysisSettings
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


def test_a_part_failing_to_store_keeps_the_parts_stored_before_it_and_leaves_the_rest_as_it_was(
        demo_db, small_parts, monkeypatch):
    # A refresh stores each part in its own write (refresh.fleet_afresh): the two parts before the failing one are
    # stored whole, the failing part and those after it keep the analysis they had, and the fleet's refit is not
    # run; the run fails with the part's error.
    with demo_db.sessions() as session:
        before = _rows(session)
        results_before = {row.pump_id: row.computed_at for row in session.execute(
            select(AnalysisResult.pump_id, AnalysisResult.computed_at))}
    read, calls = spool.read_part, []

    def failing_third(path):
        calls.append(path)
        if len(calls) == 3:
            raise OSError(f"{path}: disk gone")
        return read(path)

    monkeypatch.setattr(store_fleet, "read_part", failing_third)
    later = NOW + dt.timedelta(days=1)
    with pytest.raises(OSError, match="disk gone"):
        reanalyse(demo_db.sessions, now=later, workers=1)
    with demo_db.sessions() as session:
        after = {row.pump_id: row.computed_at for row in session.execute(
            select(AnalysisResult.pump_id, AnalysisResult.computed_at))}
        priors = _rows(session)["fleet_prior"]
    ids = sorted(results_before)
    assert len(ids) == 41  # parts of 6 or 7 (compute.part_ids): the first two hold 13 pumps
    assert all(after[p] == later for p in ids[:13])
    assert all(after[p] == results_before[p] for p in ids[13:])
    _same_rows({"fleet_prior": before["fleet_prior"]}, {"fleet_prior": priors})


def _bits(value):
    """A parsed JSON value with each float as its exact bits (so -0.0 and 0.0, or two floats a last bit apart,
    differ), for comparing two encoders' texts by what they read back as."""
    if isinstance(value, dict):
        return {k: _bits(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_bits(v) for v in value]
    if isinstance(value, float):
        return ("float", struct.pack("<d", value))
    return (type(value).__name__, value)


def _same_as_json_module(value) -> None:
    """spool.json_text reads back (Python's json.loads) as exactly what json.dumps' text of the same value does."""
    assert _bits(json.loads(spool.json_text(value))) == _bits(json.loads(json.dumps(value)))


@pytest.mark.parametrize("value", [
    0.1 + 0.2, 1e-5, 1e16, 1e22, 123456789.125, 5e-324, 2.2250738585072014e-308, 1.7976931348623157e308, -0.0, 0.0,
    -1.5e-300, 2**53 + 1, -(2**63), 2**64 - 1, True, False, None, "", "slip \u00b5 \u2264 1 \"quoted\" \\ \n \t \x01",
    {"a": [1, 2.5, None, {"b": "c"}], "d": []},
])
def test_the_spooled_json_text_reads_back_as_pythons_json(value):
    # The reference is the standard library's json module (its text is what store.store's JSON columns hold).
    _same_as_json_module(value)
    if isinstance(value, float):
        # json_ready leaves no NaN or infinity in what is spooled (orjson would write null for one)
        _same_as_json_module([value * k for k in (1.0, 3.0, 1 / 3, 1e-7, 7e11) if math.isfinite(value * k)])


def test_a_spooled_parts_json_texts_read_back_as_pythons_json(demo_db, small_parts, tmp_path):
    # Every detail and every fit of the demo plant's parts, as the store would write them; the reference is the
    # text of the standard library's json module (a NaN there reads back unequal to itself, so none may hide).
    with demo_db.sessions() as session, session.begin():
        analysed = spool.spool_fleet(session, tmp_path, NOW)
    texts = 0
    for path in analysed.parts:
        part = spool.read_part(path)
        for record, detail in zip(part.records, part.details, strict=True):
            expected = json_ready({k: v for k, v in record.items() if k not in NOT_IN_DETAIL})
            assert _bits(json.loads(detail)) == _bits(json.loads(json.dumps(expected)))
            texts += 1
        for fit_json in part.trends["fit_json"]:
            assert "NaN" not in fit_json and "Infinity" not in fit_json
            texts += 1
    assert texts > 2 * 41


def test_a_parts_fit_texts_read_back_as_pythons_json(demo_db):
    # The fits of interval_trends (fleet.trend.interval_trends) as spool_part writes them, against json.dumps.
    with demo_db.sessions() as session, session.begin():
        part = compute_module.analyse_part(session, None, NOW, AnalysisSettings())
    fits = part.trends["fit"].tolist()
    assert len(fits) > 41
    for fit in fits:
        _same_as_json_module(fit)
