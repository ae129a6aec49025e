"""A write places its pumps in the stored service order by their keys, without re-ranking the list, and the
order is the one a full re-rank gives. The demo plant is invented."""

from datetime import timedelta

from sqlalchemy import select, update

from fleet.db.models import AnalysisResult, Pump, Reading
from fleet.services.analysis import store
from fleet.timeutil import utcnow


def _ranks(demo_db) -> dict[int, tuple[int, bytes]]:
    with demo_db.sessions() as session:
        return {p: (r, k) for p, r, k in session.execute(
            select(AnalysisResult.pump_id, AnalysisResult.rank, AnalysisResult.order_key))}


def _full_rerank(rerank, demo_db) -> dict[int, tuple[int, bytes]]:
    with demo_db.sessions() as session, session.begin():
        rerank(session)
        ranks = {p: (r, k) for p, r, k in session.execute(
            select(AnalysisResult.pump_id, AnalysisResult.rank, AnalysisResult.order_key))}
        session.rollback()
    return ranks


def _post(client, demo_db, serial: str, flow_share: float, minutes_ago: int) -> None:
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == serial))
        hours = session.scalar(select(Reading.hours).where(Reading.pump_id == pump.id)
                               .order_by(Reading.hours.desc()).limit(1))
        speed, displacement = pump.rated_speed_rpm, pump.displacement_cc
    body = {"pump": serial, "taken_at": (utcnow() - timedelta(minutes=minutes_ago)).isoformat(timespec="minutes"),
            "hours": hours + 10, "outlet_pressure": 150, "speed": speed,
            "outlet_flow": round(flow_share * displacement * speed / 1000.0, 2), "oil_temp": 50}
    response = client.post("/api/readings", json=body)
    assert response.status_code == 201, response.get_data(True)


def test_posted_readings_place_their_pump_as_a_full_rerank_would(client, demo_db, monkeypatch):
    whole = []
    original = store.rerank
    monkeypatch.setattr(store, "rerank", lambda session: (whole.append(1), original(session)))
    before = _ranks(demo_db)
    assert all(key is not None for _, key in before.values())
    # A pump's flow falls far (it moves up the list), then recovers (it moves back down).
    for number, share in enumerate((0.55, 0.97, 0.3)):
        _post(client, demo_db, "EY-104", share, minutes_ago=30 - number)
        assert whole == [], "a one-pump write re-ranked the whole list"
        stored = _ranks(demo_db)
        assert sorted(r for r, _ in stored.values()) == list(range(1, len(stored) + 1))
        assert stored == _full_rerank(original, demo_db)
    pump_id = next(p for p in stored if p in before and stored[p] != before[p])
    assert stored[pump_id][0] != before[pump_id][0], "the test's readings did not move the pump"


def test_rows_without_keys_are_re_ranked_whole_once(client, demo_db):
    with demo_db.sessions() as session, session.begin():
        session.execute(update(AnalysisResult).values(order_key=None, rank=1))  # as left by the migration
    _post(client, demo_db, "EY-104", 0.9, minutes_ago=20)
    stored = _ranks(demo_db)
    assert all(key is not None for _, key in stored.values())
    assert stored == _full_rerank(store.rerank, demo_db)
