"""Attack: SQL injection. Text that looks like SQL, typed into forms, posted to the API, uploaded in a CSV file,
put in filters, paths and the sign-in form, is stored and matched as plain text; no table is dropped and no filter
is widened."""

import io
from datetime import timedelta
from urllib.parse import quote

from sqlalchemy import func, select

from fleet.db.models import MaintenanceEvent, Position, Pump, Reading, Route, Site, User
from fleet.timeutil import utcnow
from tests.test_security_login import _attempt
from tests.test_security_write_routes import database_contents

SERIAL = "EY-9'); DROP TABLE reading; --"
NOTE = "' OR '1'='1'; DELETE FROM pump WHERE '1'='1"
WIDEN = "' OR '1'='1"


def _counts(demo_db) -> dict:
    with demo_db.sessions() as s:
        return {model.__tablename__: s.scalar(select(func.count()).select_from(model))
                for model in (Pump, Reading, MaintenanceEvent, Site, Route, User)}


def test_sql_in_forms_api_and_upload_is_stored_as_text(client, demo_db):
    before = _counts(demo_db)
    with demo_db.sessions() as s:
        position_id = s.scalar(select(Position.id).where(Position.name == "pump 1"))
        hours = s.scalar(select(func.max(Reading.hours)).join(Pump).where(Pump.serial == "EY-104"))
    assert client.post("/register/pump/new", data={
        "pump": SERIAL, "position_id": str(position_id), "kind": "vane", "displacement": "20",
        "rated_speed": "1450", "rated_pressure": "140", "note": NOTE}).status_code == 302
    assert client.post("/register/site/new", data={"site": "Works'; DROP TABLE site; --", "currency": "EUR",
                                                   "note": NOTE}).status_code == 302
    taken_at = (utcnow() - timedelta(minutes=10)).isoformat(timespec="minutes")
    reading = {"pump": "EY-104", "taken_at": taken_at, "hours": hours + 1, "outlet_pressure": 150,
               "speed": 1450, "outlet_flow": 40.0, "oil_temp": 50, "note": NOTE, "taken_by": "x'); --"}
    response = client.post("/api/readings", json=reading)
    assert response.status_code == 201, response.get_json()
    events = f'pump,date,kind,note\nEY-101,2026-01-02,inspection,"{NOTE}"\n'.encode()
    upload = client.post("/register/upload", data={"kind": "events", "file": (io.BytesIO(events), "e.csv")},
                         content_type="multipart/form-data")
    assert upload.status_code == 200
    assert client.post("/rounds", data={"name": "Walk'; DROP TABLE route; --", "pumps": f"EY-104\n{SERIAL}",
                                        "note": NOTE}).status_code == 302

    after = _counts(demo_db)
    assert after["pump"] == before["pump"] + 1 and after["site"] == before["site"] + 1
    assert after["maintenance_event"] == before["maintenance_event"] + 1 and after["route"] == before["route"] + 1
    assert after["reading"] >= before["reading"]  # nothing dropped or deleted
    with demo_db.sessions() as s:
        pump = s.scalar(select(Pump).where(Pump.serial == SERIAL))
        assert pump.note == NOTE
        assert s.scalar(select(MaintenanceEvent.note).where(MaintenanceEvent.note == NOTE)) == NOTE
        assert s.scalar(select(Site.note).where(Site.name == "Works'; DROP TABLE site; --")) == NOTE
        assert s.get(Reading, response.get_json()["readings"][0]["id"]).note == NOTE
    # The pump has its own page, found by its whole serial and nothing else.
    assert client.get("/pumps/" + quote(SERIAL, safe="") + ".json").get_json()["pump"]["serial"] == SERIAL


def test_sql_in_filters_and_paths_widens_nothing(client, demo_db):
    before = database_contents(demo_db)
    for name in ("site", "machine", "kind", "status"):
        response = client.get(f"/index.json?{name}={quote(WIDEN)}&page_size=500")
        assert response.status_code in (200, 400), name
        if response.status_code == 200:
            assert response.get_json()["pumps"] == [], name  # no site is called that: no rows, not all rows
    assert client.get("/index.json?sort=" + quote("serial; DROP TABLE pump")).status_code in (200, 400)
    assert client.get("/pumps/" + quote("EY-104' OR '1'='1", safe="") + ".json").status_code == 404
    assert client.get("/register/pump/" + quote(WIDEN, safe="") + "/edit").status_code == 404
    assert client.get("/review?week=" + quote("2026-01-01'; DROP TABLE reading; --")).status_code in (200, 400)
    assert client.get("/plan?weeks=" + quote("1; DROP TABLE pump")).status_code == 200
    assert database_contents(demo_db) == before


def test_sql_in_the_sign_in_form_signs_no_one_in(anonymous_client):
    for name, password in ((WIDEN, "anything at all"), ("test-engineer' --", "anything at all"),
                           ("test-engineer", WIDEN), ("' OR 1=1 --", "' OR 1=1 --")):
        assert _attempt(anonymous_client, name, password).status_code == 401, name
    assert anonymous_client.get("/").status_code == 302
