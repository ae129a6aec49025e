"""A write keys its own pumps' places in the stored service order and touches no other pump's row; the rank every
reader shows, derived from the keys when read, is the one fleet.trend.status.service_rank gives the stored list
(the project's own reference ordering: status first, then how far past or how soon, then the serial; checked
against hand-written orders in tests/test_trend_status.py). The demo plant is invented."""

import io

import pandas as pd
from sqlalchemy import select, update

from fleet.db.models import AnalysisResult, Pump
from fleet.services.analysis import analysis_records, store
from fleet.services.analysis.read_figures import ranks
from fleet.services.pages.service_list import ListQuery, service_list
from fleet.trend.status import service_order_keys, service_rank
from tests.posting import post_reading


def _stored(demo_db) -> pd.DataFrame:
    with demo_db.sessions() as session:
        rows = session.execute(select(
            AnalysisResult.pump_id, AnalysisResult.order_key, AnalysisResult.computed_at, AnalysisResult.status,
            AnalysisResult.hours_to_limit, AnalysisResult.past_margin, AnalysisResult.limit_date_low, Pump.serial)
            .join(Pump, Pump.id == AnalysisResult.pump_id)).all()
    frame = pd.DataFrame(rows, columns=["pump_id", "order_key", "computed_at", "status", "hours_to_limit",
                                        "past_margin", "limit_date_low", "pump"]).set_index("pump_id")
    return frame.astype({"hours_to_limit": float, "past_margin": float}).sort_index()


def _reference_ranks(frame: pd.DataFrame) -> dict[int, int]:
    return {int(p): int(r) for p, r in service_rank(frame).items()}


def _every_reader_shows(demo_db, client, expected: dict[int, int]) -> None:
    """The JSON records, the service list (every page, JSON twin), the pump page and the one-by-one count all
    show the reference rank."""
    with demo_db.sessions() as session:
        serial_of = dict(session.execute(select(Pump.id, Pump.serial)).all())
        by_serial = {serial_of[p]: r for p, r in expected.items()}
        assert ranks(session) == expected
        assert ranks(session, list(expected)[:3]) == {p: expected[p] for p in list(expected)[:3]}  # counted
        records = analysis_records(session)
        assert [r["rank"] for r in records] == list(range(1, len(expected) + 1))
        assert {r["pump"]: r["rank"] for r in records} == by_serial
        listed = {}
        for page in range(1, 6):
            listed.update({p["pump"]: p["rank"] for p in service_list(session, ListQuery(page=page, page_size=12))
                           ["pumps"] if p["rank"] is not None})
        assert listed == by_serial
    shown = {p["pump"]: p["rank"] for p in client.get("/index.json?page_size=500").get_json()["pumps"]}
    assert shown == by_serial
    filtered = client.get("/index.json?status=healthy&sort=pump").get_json()["pumps"]  # ranks in the whole list
    assert filtered and all(p["rank"] == by_serial[p["pump"]] for p in filtered)
    csv = pd.read_csv(io.StringIO(client.get("/index.csv?page_size=500").get_data(True)))
    assert dict(zip(csv["pump"], csv["rank"], strict=True)) == by_serial
    for serial in sorted(by_serial, key=by_serial.get)[:2]:
        assert client.get(f"/pumps/{serial}.json").get_json()["headline"]["rank"] == by_serial[serial]


def test_posted_readings_key_only_their_pump_and_every_reader_shows_the_reference_rank(client, demo_db,
                                                                                       monkeypatch):
    whole = []
    original = store.rerank
    monkeypatch.setattr(store, "rerank", lambda session: (whole.append(1), original(session)))
    before = _stored(demo_db)
    assert before["order_key"].notna().all()
    _every_reader_shows(demo_db, client, _reference_ranks(before))
    pump_id = None
    # A pump's flow falls far (it moves up the list), then recovers (it moves back down).
    for number, share in enumerate((0.55, 0.97, 0.3)):
        previous = _stored(demo_db)
        post_reading(client, demo_db, "EY-104", hours_added=10, flow_share=share, minutes_ago=30 - number)
        assert whole == [], "a one-pump write re-keyed the whole list"
        stored = _stored(demo_db)
        pump_id = pump_id or int(stored.index[stored["pump"] == "EY-104"][0])
        others = stored.index != pump_id
        # No other pump's row was written: its key and its computed_at are as before.
        unchanged = ["order_key", "computed_at"]
        assert stored.loc[others, unchanged].equals(previous.loc[others, unchanged])
        assert list(stored["order_key"]) == list(service_order_keys(stored))  # each key the reference's
        _every_reader_shows(demo_db, client, _reference_ranks(stored))
    assert _reference_ranks(stored)[pump_id] != _reference_ranks(before)[pump_id], \
        "the test's readings did not move the pump"


def test_rows_without_keys_are_keyed_whole_once(client, demo_db):
    with demo_db.sessions() as session, session.begin():
        session.execute(update(AnalysisResult).values(order_key=None))  # as left from before keys existed
    with demo_db.sessions() as session:
        assert ranks(session) == {}
        assert {r["rank"] for r in analysis_records(session)} == {None}
    post_reading(client, demo_db, "EY-104", hours_added=10, flow_share=0.9, minutes_ago=20)
    stored = _stored(demo_db)
    assert list(stored["order_key"]) == list(service_order_keys(stored))
    _every_reader_shows(demo_db, client, _reference_ranks(stored))
