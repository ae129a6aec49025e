"""POST /api/readings: validated by the importer, all or nothing, never a 500 on bad input."""

from datetime import timedelta

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from fleet.db.models import Pump, Reading
from fleet.timeutil import utcnow

FIXED, VANE = "EY-104", "EY-105"  # invented demo plant pumps


def _count(demo_db) -> int:
    with demo_db.sessions() as session:
        return session.scalar(select(func.count()).select_from(Reading))


def _last_hours(demo_db, serial) -> float:
    with demo_db.sessions() as session:
        return session.scalar(select(func.max(Reading.hours)).join(Pump, Pump.id == Reading.pump_id)
                              .where(Pump.serial == serial))


def _reading(demo_db, serial, minutes_ago=10, **changes) -> dict:
    body = {"pump": serial, "taken_at": (utcnow() - timedelta(minutes=minutes_ago)).isoformat(timespec="minutes"),
            "hours": _last_hours(demo_db, serial) + 8, "outlet_pressure": 150, "speed": 1450, "outlet_flow": 40.0,
            "oil_temp": 50}
    body.update(changes)
    return body


def test_one_reading_with_units_is_stored_and_the_pump_reanalysed(client, demo_db):
    # 3000 psi = 206.84 bar; 10 gal/min = 37.854 L/min; 140 degF = 60 degC (NIST SP 811, as pint defines them).
    body = _reading(demo_db, FIXED, outlet_pressure={"value": 3000, "unit": "psi"},
                    outlet_flow={"value": 10, "unit": "gal/min"}, oil_temp={"value": 140, "unit": "degF"})
    response = client.post("/api/readings", json=body)
    assert response.status_code == 201
    data = response.get_json()
    assert set(data) == {"created", "repeat", "readings", "pumps", "doubts"} and data["created"] == 1
    assert data["repeat"] is False and data["doubts"] == []
    assert set(data["readings"][0]) == {"id", "pump", "taken_at", "client_id", "repeat"}
    assert set(data["pumps"][0]) == {"pump", "status", "reasons", "eta_v_ref", "hours_to_limit", "limit_date"}
    assert data["pumps"][0]["pump"] == FIXED and data["pumps"][0]["status"] in {"past_limit", "due_soon", "watch",
                                                                               "healthy"}
    with demo_db.sessions() as session:
        stored = session.get(Reading, data["readings"][0]["id"])
        assert stored.source == "api"
        assert stored.pressure_bar == pytest.approx(206.84, abs=0.005)
        assert stored.flow_lpm == pytest.approx(37.854, abs=0.0005)
        assert stored.temp_c == pytest.approx(60.0, abs=1e-9)
    listed = {row["pump"]: row for row in client.get("/index.json?page_size=500").get_json()["pumps"]}
    assert listed[FIXED]["status"] == data["pumps"][0]["status"]


def test_a_list_for_two_pumps_with_different_units_per_object(client, demo_db):
    before = _count(demo_db)
    body = [_reading(demo_db, FIXED, outlet_pressure=150),
            _reading(demo_db, VANE, outlet_pressure={"value": 1500, "unit": "psi"})]
    response = client.post("/api/readings", json=body)
    assert response.status_code == 201, response.get_json()
    data = response.get_json()
    assert [r["pump"] for r in data["readings"]] == [FIXED, VANE] and all(r["id"] for r in data["readings"])
    assert [p["pump"] for p in data["pumps"]] == [FIXED, VANE]
    assert _count(demo_db) == before + 2
    with demo_db.sessions() as session:
        pressures = [session.get(Reading, r["id"]).pressure_bar for r in data["readings"]]
    assert pressures == pytest.approx([150.0, 1500 * 0.0689475729])  # 1 psi = 0.0689475729 bar (NIST SP 811)


@pytest.mark.parametrize("change, row, column, words", [
    ({"hours": None}, 2, "hours", "a value is required"),
    ({"pump": "NOPE-1"}, 2, "pump", "no pump 'NOPE-1' in the register"),
    ({"outlet_pressure": {"value": 3, "unit": "blorps"}}, 2, "outlet_pressure", "not a unit fleet knows"),
    ({"outlet_flow": {"value": 3, "unit": "psi"}}, 2, "outlet_flow", "is not a unit of flow"),
    ({"speed": "fast"}, 2, "speed", "'fast' is not a number"),
    ({"oil_temp": [50]}, 2, "oil_temp", "expected a number or text"),
    ({"hours": float("nan")}, 2, "hours", "not a finite number"),
    ({"colour": "red"}, 2, "colour", "not a readings field"),
    ({"source": "import"}, 2, "source", "not a readings field"),
    ({"taken_at": "yesterday"}, 2, "taken_at", "is not a date"),
])
def test_a_bad_object_in_a_list_writes_nothing(client, demo_db, change, row, column, words):
    before = _count(demo_db)
    body = [_reading(demo_db, VANE), _reading(demo_db, FIXED, **change)]
    response = client.post("/api/readings", json=body)
    assert response.status_code == 422
    problems = response.get_json()["problems"]
    assert any(p["row"] == row and p["column"] == column and words in p["reason"] for p in problems), problems
    assert all(set(p) == {"row", "column", "reason"} for p in problems)
    assert _count(demo_db) == before


def test_a_reading_already_stored_is_refused(client, demo_db):
    body = _reading(demo_db, FIXED)
    assert client.post("/api/readings", json=body).status_code == 201
    again = client.post("/api/readings", json=body)
    assert again.status_code == 422
    assert "is already stored" in again.get_json()["problems"][0]["reason"]


@pytest.mark.parametrize("payload, status", [
    (b"not json", 400), (b"[]", 422), (b"5", 422), (b'"text"', 422), (b"[null]", 422), (b"{}", 422),
])
def test_shapes_that_are_not_readings(client, demo_db, payload, status):
    before = _count(demo_db)
    response = client.post("/api/readings", data=payload, content_type="application/json")
    assert response.status_code == status
    assert response.get_json()["problems"]
    assert _count(demo_db) == before


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**12, 10**12) | st.floats(allow_nan=True) | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner, max_size=3),
    max_leaves=6,
)
fields = st.sampled_from(["pump", "taken_at", "hours", "outlet_pressure", "speed", "outlet_flow", "case_drain_flow",
                          "oil_temp", "stroke", "note", "unit", "value"])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=st.dictionaries(fields, json_values, max_size=8) | st.lists(st.dictionaries(fields, json_values,
                                                                                        max_size=8), max_size=3))
def test_random_bodies_never_cause_a_server_error(client, body):
    response = client.post("/api/readings", json=body)
    assert response.status_code in (201, 400, 422)
    assert response.is_json
