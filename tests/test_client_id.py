"""client_id on POST /api/readings: a device's resend stores nothing twice; the same id with other values is
refused; a pump moved since the reading was taken is named (the optional place)."""

import threading
import uuid
from datetime import timedelta

import pytest
from sqlalchemy import func, select

from fleet.db.engine import make_engine, make_session_factory
from fleet.db.models import Pump, Reading
from fleet.db.queries import current_places
from fleet.services.posted_readings import ClientIdConflict, store_posted
from fleet.services.writes import perform
from fleet.timeutil import utcnow

FIXED, VANE = "EY-104", "EY-105"  # invented demo plant pumps


def _count(demo_db, **where) -> int:
    statement = select(func.count()).select_from(Reading)
    if "client_id" in where:
        statement = statement.where(Reading.client_id == where["client_id"])
    with demo_db.sessions() as session:
        return session.scalar(statement)


def _reading(demo_db, serial=FIXED, minutes_ago=10, **changes) -> dict:
    with demo_db.sessions() as session:
        hours = session.scalar(select(func.max(Reading.hours)).join(Pump, Pump.id == Reading.pump_id)
                               .where(Pump.serial == serial))
    body = {"pump": serial, "taken_at": (utcnow() - timedelta(minutes=minutes_ago)).isoformat(timespec="minutes"),
            "hours": hours + 8, "outlet_pressure": 150, "speed": 1450, "outlet_flow": 40.0, "oil_temp": 50,
            "client_id": str(uuid.uuid4())}
    body.update(changes)
    return body


def _place(demo_db, serial=FIXED) -> dict:
    with demo_db.sessions() as session:
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == serial))
        place = current_places(session, [pump_id])[pump_id]
        return {"site": place.site, "machine": place.machine, "position": place.position}


def test_a_repeat_stores_nothing_and_answers_with_the_stored_reading(client, demo_db):
    body = _reading(demo_db)
    before = _count(demo_db)
    first = client.post("/api/readings", json=body)
    assert first.status_code == 201, first.get_json()
    stored = first.get_json()["readings"][0]
    assert stored["client_id"] == body["client_id"] and stored["repeat"] is False
    again = client.post("/api/readings", json=body)
    assert again.status_code == 200, again.get_json()
    data = again.get_json()
    assert data["repeat"] is True and data["created"] == 0
    assert data["readings"] == [{**stored, "repeat": True}]
    assert _count(demo_db) == before + 1 and _count(demo_db, client_id=body["client_id"]) == 1


def test_the_same_values_in_other_units_are_a_repeat(client, demo_db):
    # 150 bar = 2175.566 psi (pint's psi, NIST SP 811: 1 psi = 6894.757 Pa); compared in canonical units.
    body = _reading(demo_db)
    assert client.post("/api/readings", json=body).status_code == 201
    in_psi = {**body, "outlet_pressure": {"value": 150e5 / 6894.757293168361, "unit": "psi"}}
    again = client.post("/api/readings", json=in_psi)
    assert again.status_code == 200 and again.get_json()["repeat"] is True


def test_the_same_id_with_other_values_is_refused_and_stores_nothing(client, demo_db):
    body = _reading(demo_db)
    assert client.post("/api/readings", json=body).status_code == 201
    before = _count(demo_db)
    other = client.post("/api/readings", json={**body, "oil_temp": 55})
    assert other.status_code == 409
    problem = other.get_json()["problems"][0]
    assert problem["row"] == 1 and problem["column"] == "client_id" and "oil_temp" in problem["reason"]
    moved_in_time = client.post("/api/readings", json=_reading(demo_db, minutes_ago=20,
                                                                client_id=body["client_id"]))
    assert moved_in_time.status_code == 409 and "taken_at" in moved_in_time.get_json()["problems"][0]["reason"]
    assert _count(demo_db) == before


@pytest.mark.parametrize("bad", ["x" * 65, 12345, None, ["a"], "", "   "])
def test_a_bad_client_id_is_refused_with_400(client, demo_db, bad):
    before = _count(demo_db)
    response = client.post("/api/readings", json=_reading(demo_db, client_id=bad))
    assert response.status_code == 400
    assert response.get_json()["problems"][0]["column"] == "client_id"
    assert _count(demo_db) == before


def test_an_id_of_64_characters_is_taken(client, demo_db):
    response = client.post("/api/readings", json=_reading(demo_db, client_id="k" * 64))
    assert response.status_code == 201 and _count(demo_db, client_id="k" * 64) == 1


def test_one_id_twice_in_a_list_is_refused(client, demo_db):
    first = _reading(demo_db, FIXED)
    second = _reading(demo_db, VANE, client_id=first["client_id"])
    before = _count(demo_db)
    response = client.post("/api/readings", json=[first, second])
    assert response.status_code == 422
    assert response.get_json()["problems"] == [{"row": 2, "column": "client_id", "reason": response.get_json()[
        "problems"][0]["reason"]}]
    assert _count(demo_db) == before


def test_a_list_with_one_repeat_stores_only_the_new_reading(client, demo_db):
    first = _reading(demo_db, FIXED)
    assert client.post("/api/readings", json=first).status_code == 201
    before = _count(demo_db)
    response = client.post("/api/readings", json=[first, _reading(demo_db, VANE)])
    assert response.status_code == 201
    data = response.get_json()
    assert data["created"] == 1 and data["repeat"] is False
    assert [r["repeat"] for r in data["readings"]] == [True, False]
    assert _count(demo_db) == before + 1


def test_problems_of_a_new_reading_in_a_list_name_its_posted_row(client, demo_db):
    first = _reading(demo_db, FIXED)
    assert client.post("/api/readings", json=first).status_code == 201
    response = client.post("/api/readings", json=[first, _reading(demo_db, VANE, oil_temp=400)])
    assert response.status_code == 422
    assert [(p["row"], p["column"]) for p in response.get_json()["problems"]] == [(2, "oil_temp")]


def test_a_reading_of_a_pump_moved_meanwhile_is_refused(client, demo_db):
    place = _place(demo_db)
    response = client.post("/api/readings", json=_reading(demo_db, place={**place, "position": "elsewhere"}))
    assert response.status_code == 422
    problem = response.get_json()["problems"][0]
    assert problem["column"] == "place" and "moved" in problem["reason"] and place["position"] in problem["reason"]
    ok = client.post("/api/readings", json=_reading(demo_db, place=place))
    assert ok.status_code == 201


def test_a_bad_place_is_refused_with_400(client, demo_db):
    response = client.post("/api/readings", json=_reading(demo_db, place="hall 2"))
    assert response.status_code == 400 and response.get_json()["problems"][0]["column"] == "place"


def _rows(body: dict) -> list[dict[str, str]]:
    return [{k: str(v) for k, v in body.items() if k not in ("client_id", "place")}]


@pytest.mark.slow
def test_repeats_sent_at_once_store_one_reading(demo_db):
    """Four devices send the same id at once, two with other values: one reading is stored, the same values are
    answered as repeats and the other values as conflicts, never an error (on PostgreSQL the unique constraint
    decides the race; the unit of work runs again and finds the stored row)."""
    body = _reading(demo_db)
    bodies = [body, body, {**body, "oil_temp": 60}, {**body, "oil_temp": 60}]
    outcomes: list = [None] * len(bodies)
    barrier = threading.Barrier(len(bodies))

    def device(n: int) -> None:
        engine = make_engine(demo_db.url)
        try:
            barrier.wait()
            result = perform(make_session_factory(engine),
                             lambda s: store_posted(s, _rows(bodies[n]), [body["client_id"]], [None]))
            outcomes[n] = "repeat" if result.value.created == 0 else "stored"
        except ClientIdConflict:
            outcomes[n] = "conflict"
        except BaseException as error:  # any other error is a failure the test reports
            outcomes[n] = error
        finally:
            engine.dispose()

    threads = [threading.Thread(target=device, args=(n,)) for n in range(len(bodies))]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=300)
    assert outcomes.count("stored") == 1, outcomes
    winner = outcomes.index("stored")
    same = [n for n in range(len(bodies)) if bodies[n] == bodies[winner] and n != winner]
    assert [outcomes[n] for n in same] == ["repeat"]
    assert all(outcomes[n] == "conflict" for n in range(len(bodies)) if n not in same and n != winner)
    assert _count(demo_db, client_id=body["client_id"]) == 1


def test_a_repeat_at_a_site_with_its_own_zone_is_a_repeat_not_a_conflict(client, demo_db):
    """A device sends the site's wall-clock time without an offset; comparing the resend with the stored reading
    must read that time in the same zone as storing it did. Reference: Python's zoneinfo (IANA tz database)."""
    from zoneinfo import ZoneInfo

    from tests.test_site_zones import _set_site

    _set_site(demo_db, time_zone="America/Chicago")
    wall = (utcnow() - timedelta(hours=1)).replace(tzinfo=ZoneInfo("UTC")).astimezone(ZoneInfo("America/Chicago"))
    body = _reading(demo_db, taken_at=wall.strftime("%Y-%m-%dT%H:%M"))
    first = client.post("/api/readings", json=body)
    assert first.status_code == 201, first.get_json()
    again = client.post("/api/readings", json=body)
    assert again.status_code == 200 and again.get_json()["repeat"] is True, again.get_json()
    with demo_db.sessions() as session:
        stored = session.scalar(select(Reading.taken_at).where(Reading.client_id == body["client_id"]))
    assert stored == wall.replace(second=0, microsecond=0).astimezone(ZoneInfo("UTC")).replace(tzinfo=None)
