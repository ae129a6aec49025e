"""Every door writing at once, over real HTTP and a real command-line process, on SQLite and on PostgreSQL.

API writers with tokens, technicians saving round forms in signed-in browsers' stead, and `fleet import` in its
own process all write to one database at the same moment. Pass means: no answer is a 5xx, every acknowledged
write is stored exactly once, the same new reading posted twice at once is stored once (one 201, one 4xx), and
afterwards no analysis is stale and each equals a full analysis. The demo plant and every value are invented.
"""

import http.cookiejar
import json
import os
import re
import subprocess
import sys
import threading
import urllib.error
import urllib.parse
import urllib.request
from datetime import timedelta

import pytest
from sqlalchemy import func, select
from werkzeug.serving import make_server

from fleet.db.models import Pump, Reading, Route, RouteStop
from fleet.db.transaction import run_write
from fleet.services import users
from fleet.timeutil import utcnow
from tests.conftest import TEST_PASSWORD
from tests.test_write_invariant import assert_stored_equals_full

API_WRITERS, API_READINGS = 4, 8
FORM_WRITERS, FORM_SAVES = 2, 4
CLI_PUMPS, CLI_READINGS = 4, 100
ALL_DOUBTS = ("pressure_above_rated,flow_above_theoretical,temperature_outside_limits,hours_backwards,"
              "hours_faster_than_clock,time_in_future")  # every doubt: its readings run the meter 8 h a minute


def _pump_facts(demo_db, count: int) -> list[dict]:
    """Installed pumps with their rating and last reading, most recently read last (so new times stay past)."""
    with demo_db.sessions() as session:
        rows = session.execute(
            select(Pump.serial, Pump.id, Pump.displacement_cc, Pump.rated_speed_rpm, Pump.rated_pressure_bar,
                   func.max(Reading.taken_at), func.max(Reading.hours))
            .join(Reading, Reading.pump_id == Pump.id).group_by(Pump.id).order_by(Pump.serial)).all()
    keys = ("serial", "id", "vg", "speed", "pressure", "last_at", "last_hours")
    return [dict(zip(keys, row, strict=True)) for row in rows][:count]


def _values(pump: dict, n: int) -> dict:
    """The n-th new reading of a pump: a minute apart, eight hours of running apart, healthy figures."""
    return {"taken_at": (pump["last_at"] + timedelta(minutes=n + 1)).strftime("%Y-%m-%d %H:%M"),
            "hours": f"{pump['last_hours'] + 8 * (n + 1):.1f}", "outlet_pressure": f"{0.8 * pump['pressure']:.1f}",
            "speed": f"{pump['speed']:.0f}", "outlet_flow": f"{0.85 * pump['vg'] * pump['speed'] / 1000:.2f}",
            "oil_temp": "50"}


class Browser:
    """A signed-in browser's requests, with its cookies and the session's CSRF token."""

    def __init__(self, base: str, name: str):
        self.base = base
        self.opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(http.cookiejar.CookieJar()),
                                                  _NoRedirect)
        token = self._token(self.get("/login"))
        status, _ = self.post("/login", {"name": name, "password": TEST_PASSWORD, "csrf_token": token})
        assert status == 302, status
        self.csrf = self._token(self.get("/rounds"))

    @staticmethod
    def _token(html: str) -> str:
        return re.search(r'name="csrf_token" value="([^"]+)"', html).group(1)

    def get(self, path: str) -> str:
        with self.opener.open(self.base + path, timeout=120) as response:
            return response.read().decode()

    def post(self, path: str, form: dict) -> tuple[int, str]:
        request = urllib.request.Request(self.base + path, data=urllib.parse.urlencode(form).encode(), method="POST")
        try:
            with self.opener.open(request, timeout=120) as response:
                return response.status, response.read().decode()
        except urllib.error.HTTPError as error:
            return error.code, error.read().decode()


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args, **kwargs):
        return None


def _post_json(base: str, token: str, body) -> int:
    request = urllib.request.Request(base + "/api/readings", data=json.dumps(body).encode(), method="POST",
                                     headers={"Authorization": f"Bearer {token}",
                                              "Content-Type": "application/json"})
    try:
        with urllib.request.urlopen(request, timeout=120) as response:
            return response.status
    except urllib.error.HTTPError as error:
        return error.code


@pytest.fixture
def served(demo_db):
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": demo_db.url, "SECRET_KEY": "test"})
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_port}"
    server.shutdown()
    thread.join(timeout=10)
    app.extensions["fleet_engine"].dispose()


@pytest.mark.slow
def test_api_round_forms_and_an_import_at_once(demo_db, served, tmp_path):
    pumps = _pump_facts(demo_db, API_WRITERS + FORM_WRITERS + CLI_PUMPS + 1)
    api_pumps = pumps[:API_WRITERS]
    form_pumps = pumps[API_WRITERS:API_WRITERS + FORM_WRITERS]
    cli_pumps = pumps[API_WRITERS + FORM_WRITERS:-1]
    twice = pumps[-1]
    token = run_write(demo_db.sessions, lambda s: users.create_token(s, "test-technician", "invented logger")).secret

    def make_route(session):
        route = Route(name="concurrent walk (invented)",
                      stops=[RouteStop(pump_id=p["id"], seq=i) for i, p in enumerate(form_pumps, start=1)])
        session.add(route)
        session.flush()
        return route.id

    route_id = run_write(demo_db.sessions, make_route)
    lines = ["pump,taken_at,hours,outlet_pressure,speed,outlet_flow,oil_temp"]
    for pump in cli_pumps:
        for n in range(CLI_READINGS):
            v = _values(pump, n)
            lines.append(",".join([pump["serial"], v["taken_at"], v["hours"], v["outlet_pressure"], v["speed"],
                                   v["outlet_flow"], v["oil_temp"]]))
    csv_file = tmp_path / "readings.csv"
    csv_file.write_text("\n".join(lines) + "\n")
    browsers = [Browser(served, "test-technician") for _ in form_pumps]

    answers: list[tuple[str, int, str, str]] = []  # (door, status, serial, taken_at)
    errors: list[BaseException] = []
    start = threading.Barrier(API_WRITERS + FORM_WRITERS + 3)

    def api_writer(pump):
        start.wait()
        for n in range(API_READINGS):
            body = {"pump": pump["serial"], **_values(pump, n)}
            answers.append(("api", _post_json(served, token, body), pump["serial"], body["taken_at"]))

    def technician(number, browser):
        pump = form_pumps[number - 1]
        start.wait()
        for n in range(FORM_SAVES):
            form = {**_values(pump, n), "csrf_token": browser.csrf, "action": "confirm", "confirmed": ALL_DOUBTS}
            status, _ = browser.post(f"/rounds/{route_id}/stops/{number}", form)
            answers.append(("form", status, pump["serial"], form["taken_at"]))

    def same_twice():
        body = {"pump": twice["serial"], **_values(twice, 0)}
        start.wait()
        answers.append(("twice", _post_json(served, token, body), twice["serial"], body["taken_at"]))

    cli = {}

    def importer():
        start.wait()
        cli["run"] = subprocess.run([sys.executable, "-m", "fleet", "--database", demo_db.url, "import", "readings",
                                     str(csv_file)], capture_output=True, text=True, timeout=600,
                                    env={**os.environ, "FLEET_DATABASE_URL": demo_db.url})

    def guarded(target, *args):
        try:
            target(*args)
        except BaseException as error:  # the test reports any error of a thread
            errors.append(error)

    threads = [threading.Thread(target=guarded, args=(api_writer, p)) for p in api_pumps]
    threads += [threading.Thread(target=guarded, args=(technician, i, b)) for i, b in enumerate(browsers, start=1)]
    threads += [threading.Thread(target=guarded, args=(same_twice,)) for _ in range(2)]
    threads.append(threading.Thread(target=guarded, args=(importer,)))
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=900)

    assert errors == []
    assert [a for a in answers if a[1] >= 500] == []
    assert cli["run"].returncode == 0, cli["run"].stderr
    assert sorted(a[1] for a in answers if a[0] == "twice") == [201, 422]
    acknowledged = [a for a in answers if (a[0], a[1]) in (("api", 201), ("form", 302), ("twice", 201))]
    assert len(acknowledged) == API_WRITERS * API_READINGS + FORM_WRITERS * FORM_SAVES + 1
    expected = {(serial, at) for _, _, serial, at in acknowledged}
    expected |= {(p["serial"], _values(p, n)["taken_at"]) for p in cli_pumps for n in range(CLI_READINGS)}
    with demo_db.sessions() as session:
        since = min(p["last_at"] for p in pumps) + timedelta(seconds=30)
        stored = session.execute(select(Pump.serial, Reading.taken_at).join(Pump, Pump.id == Reading.pump_id)
                                 .where(Reading.taken_at >= since)).all()
    stored_keys = [(serial, at.strftime("%Y-%m-%d %H:%M")) for serial, at in stored]
    assert len(stored_keys) == len(set(stored_keys))  # nothing stored twice
    assert expected <= set(stored_keys)  # every acknowledged write is there
    assert utcnow() > since
    assert_stored_equals_full(demo_db)
