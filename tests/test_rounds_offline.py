"""The round form's offline parts on the server: its rules as data, a fresh token, the service worker and manifest;
every problem and doubt of a reading shown at once; 'Round complete' in place of the form."""

import json
import math
from datetime import timedelta

import pint
from sqlalchemy import func, select

from fleet.db.models import Pump, Reading
from fleet.io.columns import READINGS
from fleet.services.rounds import PumpFacts, plausibility_warnings
from fleet.timeutil import utcnow

FIRST, SECOND = "EY-104", "EY-105"  # invented demo plant pumps
UREG = pint.UnitRegistry()


def _route(client, pumps=(FIRST, SECOND)) -> int:
    response = client.post("/rounds", data={"name": "Offline walk", "pumps": "\n".join(pumps)})
    assert response.status_code == 302
    return int(response.headers["Location"].rstrip("/").split("/")[-1].split("?")[0])


def _pump(demo_db, serial):
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == serial))
        hours = session.scalar(select(func.max(Reading.hours)).where(Reading.pump_id == pump.id))
        return pump.displacement_cc, pump.rated_pressure_bar, pump.rated_speed_rpm, hours


def test_the_rules_a_device_checks_are_the_servers(client, demo_db):
    rules = client.get(f"/rounds/{_route(client)}/rules.json").get_json()
    columns = {c.name: c for c in READINGS}
    for name, spec in rules["fields"].items():
        assert (spec["min"], spec["max"], spec["required"]) == (columns[name].min, columns[name].max,
                                                                 columns[name].required)
    units = {name: spec["units"] for name, spec in rules["fields"].items()}
    # Conversions as pint (the reference library) defines them; figures from NIST SP 811 from memory:
    # 1 psi = 0.0689476 bar, 1 US gal = 3.785411784 L, degC = (degF - 32) * 5/9.
    assert math.isclose(units["outlet_pressure"]["psi"][0], UREG.Quantity(1, "psi").to("bar").magnitude)
    assert math.isclose(units["outlet_pressure"]["psi"][0], 0.0689476, rel_tol=1e-6)
    assert math.isclose(units["outlet_flow"]["gal/min"][0], 3.785411784, rel_tol=1e-9)
    factor, offset = units["oil_temp"]["degF"]
    assert math.isclose(factor, 5 / 9) and math.isclose(offset, -32 * 5 / 9)
    assert units["stroke"]["%"] == [0.01, 0.0]
    assert units["hours"]["h"] == [1.0, 0.0]
    displacement, rated_pressure, _speed, hours = _pump(demo_db, FIRST)
    first = rules["pumps"][FIRST]
    # The device works out the theoretical flow Q = Vg * n / 1000 (L/min from cm3/rev and rpm, the handbook
    # formula of fleet.physics) from the displacement, in the server's order of steps.
    assert first["displacement_cc"] == displacement
    assert first["rated_pressure_bar"] == rated_pressure and first["last_hours"] == hours
    assert first["fields"] == ["hours", "outlet_pressure", "speed", "outlet_flow", "oil_temp"]
    assert rules["future_tolerance_s"] == 3600


def test_rules_of_no_route_are_404(client):
    assert client.get("/rounds/999999/rules.json").status_code == 404


def test_a_fresh_token_from_session_json_lets_kept_readings_be_sent(client, demo_db, anonymous_client):
    token = client.get("/rounds/session.json")
    assert token.status_code == 200 and token.headers["Cache-Control"] == "no-store"
    data = token.get_json()
    assert data["user"] == "test-engineer" and data["role"] == "engineer"
    del client.environ_base["HTTP_X_CSRFTOKEN"]  # only the token just fetched
    *_rest, hours = _pump(demo_db, FIRST)
    body = {"pump": FIRST, "taken_at": (utcnow() - timedelta(minutes=3)).isoformat(timespec="minutes"),
            "hours": hours + 5, "outlet_pressure": 150, "speed": 1450, "oil_temp": 50, "client_id": "device-1"}
    assert client.post("/api/readings", json=body).status_code == 403  # no token: refused
    sent = client.post("/api/readings", json=body, headers={"X-CSRFToken": data["csrf_token"]})
    assert sent.status_code == 201


def test_session_json_needs_a_signed_in_user(anonymous_client):
    assert anonymous_client.get("/rounds/session.json").status_code in (302, 401)


def test_the_worker_is_served_from_the_root_to_anyone(anonymous_client):
    response = anonymous_client.get("/rounds-worker.js")
    assert response.status_code == 200 and response.mimetype == "text/javascript"
    assert response.headers["Cache-Control"] == "no-cache"
    assert b"addEventListener(\"fetch\"" in response.data


def test_the_manifest_and_its_icon(client):
    page = client.get(f"/rounds/{_route(client)}").get_data(as_text=True)
    assert 'rel="manifest" href="/static/rounds.webmanifest"' in page and "/static/rounds-offline.js" in page
    with client.get("/static/rounds.webmanifest") as manifest_response:  # a static file: close what it opened
        assert manifest_response.mimetype == "application/manifest+json"
        manifest = json.loads(manifest_response.data)
    assert manifest["start_url"] == "/rounds" and manifest["scope"] == "/rounds"
    with client.get(manifest["icons"][0]["src"]) as icon:
        assert icon.status_code == 200 and icon.mimetype == "image/svg+xml"


def test_the_walk_page_names_what_a_device_keeps(client):
    route_id = _route(client)
    page = client.get(f"/rounds/{route_id}").get_data(as_text=True)
    for url in (f"/rounds/{route_id}?stop=1", f"/rounds/{route_id}?stop=2", f"/rounds/{route_id}?stop=2&amp;done=1",
                f"/rounds/{route_id}/rules.json"):
        assert url.replace("&amp;", "\\u0026") in page or url in page
    assert f'data-next-url="/rounds/{route_id}?stop=2"' in page
    assert 'data-pump="EY-104"' in page and "data-place=" in page


def test_round_complete_replaces_the_form(client):
    route_id = _route(client)
    page = client.get(f"/rounds/{route_id}?stop=2&done=1").get_data(as_text=True)
    assert "Round complete" in page and 'class="reading-form"' not in page


def test_every_problem_and_doubt_of_a_reading_is_shown_at_once(client, demo_db):
    route_id = _route(client, (FIRST,))
    _displacement, rated_pressure, _speed, hours = _pump(demo_db, FIRST)
    form = {"taken_at": (utcnow() - timedelta(minutes=5)).strftime("%Y-%m-%dT%H:%M"),
            "hours": f"{hours - 100:.0f}", "outlet_pressure": f"{rated_pressure * 1.2:.0f}", "speed": "abc",
            "oil_temp": "400", "outlet_pressure_unit": "bar", "oil_temp_unit": "degC", "speed_unit": "rpm"}
    response = client.post(f"/rounds/{route_id}/stops/1", data=form)
    assert response.status_code == 422
    page = response.get_data(as_text=True)
    assert "&#39;abc&#39; is not a number" in page and "400 is above the highest allowed value" in page
    assert "above the rated" in page and "below the last reading" in page  # the doubts, with the problems
    # No confirming a reading that has problems: the only "Save as typed" is the device's, hidden.
    assert page.count("Save as typed</button>") == 1 and "data-offline-confirm hidden>Save as typed" in page
    with demo_db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Reading).where(Reading.hours == hours - 100)) == 0


def test_doubts_skip_the_values_that_were_refused():
    facts = PumpFacts(displacement_cc=28.0, rated_pressure_bar=200.0, oil_temp_min_c=10.0, oil_temp_max_c=70.0,
                      last_taken_at=utcnow() - timedelta(days=7), last_hours=1000.0)
    reading = {"taken_at": None, "hours": 900.0, "outlet_pressure": None, "speed": None, "outlet_flow": 80.0,
               "oil_temp": None, "stroke": None}
    assert [d.code for d in plausibility_warnings(facts, reading, utcnow())] == ["hours_backwards"]


def test_every_rounds_page_gives_the_device_the_forms_labels(client):
    """The offline form names a refused field by the labels the page carries (data-labels), the server's one list:
    on a walk, where it checks a reading, and on the list of routes, where it shows the server's verdicts."""
    import html as html_text
    import re

    from fleet.services.rounds import LABELS

    route_id = _route(client)
    for url in ("/rounds", f"/rounds/{route_id}?stop=1", f"/rounds/{route_id}?stop=2&done=1"):
        page = client.get(url).get_data(as_text=True)
        carried = re.search(r"data-labels='([^']*)'", page)
        assert carried and json.loads(html_text.unescape(carried.group(1))) == LABELS, url
    walk = client.get(f"/rounds/{route_id}?stop=1").get_data(as_text=True)
    for name in ("taken_at", "hours", "outlet_pressure", "speed", "oil_temp", "taken_by", "note"):
        assert f'<label for="f-{name}">{LABELS[name]}' in walk, name  # the same words as the form's labels
