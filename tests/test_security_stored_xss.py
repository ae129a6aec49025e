"""Attack: stored cross-site scripting. Script planted in a pump's serial and in the notes of a pump, a reading, a
maintenance event, a lab result, a route and a shutdown window is shown as text on every page that shows them, and
never runs in a real browser."""

from datetime import timedelta
from urllib.parse import quote

import pytest
from sqlalchemy import func, select

from fleet.db.models import Machine, Position, Pump, Reading, Route, Site
from fleet.timeutil import utcnow

# Each payload sets a flag the browser check reads; an alert would block the page instead of failing the test.
SERIAL = 'XSS-1<script>window.xssFired="serial"</script>'
NOTE = '<img src=x onerror="window.xssFired=\'note\'">\'"><script>window.xssFired="note"</script></textarea>'
ROUTE = '<svg onload="window.xssFired=\'route\'">walk'
RAW_FRAGMENTS = ("<script>window.xssFired", "<img src=x", "<svg onload", "</textarea><")


def _plant_payloads(client, demo_db) -> dict:
    """Every payload stored through the pages and the API a user would use; returns what the pages need."""
    with demo_db.sessions() as s:
        position_id = s.scalar(select(Position.id).where(Position.name == "pump 1"))
        machine = s.scalar(select(Machine).where(Machine.name == "power-unit-1"))
        machine_id, site_id = machine.id, s.scalar(select(Site.id).where(Site.id == machine.site_id))
        last = s.execute(select(func.max(Reading.taken_at), func.max(Reading.hours)).join(Pump)
                         .where(Pump.serial == "EY-104")).one()
    form = {"pump": SERIAL, "position_id": str(position_id), "kind": "vane", "displacement": "20",
            "rated_speed": "1450", "rated_pressure": "140", "installed_at": "2026-01-05T08:00",
            "installed_hours": "0", "note": NOTE}
    assert client.post("/register/pump/new", data=form).status_code == 302
    moment = (last[0] + timedelta(minutes=1)).strftime("%Y-%m-%dT%H:%M")
    assert client.post("/register/event/new", data={"pump": "EY-104", "date": moment, "kind": "inspection",
                                                    "note": NOTE}).status_code == 302
    assert client.post("/register/sample/new", data={"machine_id": str(machine_id), "sampled_at": moment,
                                                     "iso4406": "18/16/13", "note": NOTE}).status_code == 302
    reading = {"pump": "EY-104", "taken_at": (utcnow() - timedelta(minutes=5)).isoformat(timespec="minutes"),
               "hours": last[1] + 10, "outlet_pressure": 150, "speed": 1450, "outlet_flow": 40.0, "oil_temp": 50,
               "taken_by": NOTE, "note": NOTE}
    assert client.post("/api/readings", json=reading).status_code == 201
    start = (utcnow() + timedelta(days=30)).strftime("%Y-%m-%d")
    assert client.post("/plan/windows", data={"scope": f"site:{site_id}", "starts_at": start, "ends_at": start,
                                              "note": NOTE}).status_code == 302
    assert client.post("/rounds", data={"name": ROUTE, "pumps": f"EY-104\n{SERIAL}", "note": NOTE}
                       ).status_code == 302
    with demo_db.sessions() as s:
        route_id = s.scalar(select(Route.id).where(Route.name == ROUTE))
        assert s.scalar(select(Pump.note).where(Pump.serial == SERIAL)) == NOTE  # stored exactly as typed
    return {"route_id": route_id}


def _pages(route_id: int) -> list[str]:
    serial = quote(SERIAL, safe="")
    return ["/?page_size=500", "/register", f"/pumps/{serial}", "/pumps/EY-104", "/review", "/plan",
            "/rounds", f"/rounds/{route_id}", f"/rounds/{route_id}?stop=2", f"/register/pump/{serial}/edit"]


def test_script_in_a_serial_and_in_notes_is_shown_escaped_on_every_page(client, demo_db):
    route_id = _plant_payloads(client, demo_db)["route_id"]
    shown = {"serial": 0, "note": 0, "route": 0}
    for path in _pages(route_id):
        response = client.get(path)
        assert response.status_code == 200, path
        html = response.get_data(as_text=True)
        for fragment in RAW_FRAGMENTS:
            assert fragment not in html, (path, fragment)
        # Jinja's autoescape writes < > & ' " as entities: the text is there, inert.
        shown["serial"] += "XSS-1&lt;script&gt;window.xssFired=&#34;serial&#34;&lt;/script&gt;" in html
        shown["note"] += "&lt;img src=x onerror=" in html
        shown["route"] += "&lt;svg onload=" in html
    # The payloads really are on the pages (else the checks above prove nothing).
    assert shown["serial"] >= 5 and shown["note"] >= 3 and shown["route"] >= 2, shown


def test_the_json_and_csv_twins_carry_the_text_as_data(client, demo_db):
    _plant_payloads(client, demo_db)
    listed = client.get("/index.json?page_size=500")
    assert listed.mimetype == "application/json"
    assert SERIAL in {row["pump"] for row in listed.get_json()["pumps"]}
    twin = client.get("/register.csv")
    assert twin.mimetype == "text/csv" and "attachment" in twin.headers["Content-Disposition"]


@pytest.mark.browser
def test_planted_script_never_runs_in_the_browser(live_app, page, base_url, demo_db, browser_login, login):
    client = login(live_app.test_client(), "engineer")
    route_id = _plant_payloads(client, demo_db)["route_id"]
    dialogs = []
    page.on("dialog", lambda dialog: (dialogs.append(dialog.message), dialog.dismiss()))
    browser_login("engineer")
    for path in _pages(route_id):
        page.goto(base_url + path)
        page.wait_for_load_state("load")
        assert page.evaluate("window.xssFired === undefined"), path
    assert dialogs == []
    # The text shows as typed, e.g. the pump's serial in its page heading.
    page.goto(base_url + "/pumps/" + quote(SERIAL, safe=""))
    assert SERIAL in page.locator("h1").inner_text()
