"""In headless Chromium with no signal: a route opened before still opens, takes two readings that wait on the
device, survives a reload, and once the connection is back each reading is stored exactly once."""

import pytest
from sqlalchemy import select

from fleet.db.models import Installation, Position, Pump, Reading
from tests.test_browser_rounds import FIRST, SECOND, _facts  # invented demo plant pumps

pytestmark = pytest.mark.browser


def _stored(demo_db, serial, hours: str) -> list[tuple]:
    with demo_db.sessions() as session:
        return session.execute(select(Reading.client_id, Reading.source).join(Pump, Pump.id == Reading.pump_id)
                               .where(Pump.serial == serial, Reading.hours == float(hours))).all()


def _open_route_then_lose_signal(page, context, base_url, name: str) -> None:
    """Save a one-stop route of FIRST, wait until the device keeps its pages, then cut the connection."""
    page.goto(base_url + "/rounds")
    page.fill("#route-name", name)
    page.fill("#route-pumps", FIRST)
    page.click("text=Save route")
    page.wait_for_selector("#device-kept:has-text('kept on this device')", timeout=20000)
    context.set_offline(True)


def _fill(page, values: dict) -> None:
    for name, value in values.items():
        page.fill(f"#f-{name}", value)


def test_two_readings_taken_with_no_signal_are_stored_once_when_it_returns(live_app, page, context, base_url,
                                                                            demo_db, artifacts, browser_login):
    browser_login("technician")
    page.goto(base_url + "/rounds")
    # The list of routes says what the device keeps there: the list, not a route.
    page.wait_for_selector("#device-kept:has-text('This list of routes is kept on this device')", timeout=20000)
    page.fill("#route-name", "Walk with no signal")
    page.fill("#route-pumps", f"{FIRST}\n{SECOND}")
    page.click("text=Save route")
    page.wait_for_selector(f"text=Stop 1 of 2: pump {FIRST}")
    # The worker has kept every page of the route on the device.
    page.wait_for_selector("#device-kept:has-text('kept on this device')", timeout=20000)
    walk_url = page.url.split("?")[0]

    context.set_offline(True)
    # Proof the worker's own fetches are cut too: a page never opened answers from the device, not the server.
    page.goto(base_url + "/rounds/999999")
    assert page.is_visible("text=No signal, and this page was not opened here before")
    page.goto(walk_url + "?stop=1")
    page.wait_for_selector(f"text=Stop 1 of 2: pump {FIRST}")

    # Two problems at once, checked on the device from the server's rules: nothing kept.
    first = _facts(demo_db, FIRST)
    _fill(page, {**first, "speed": "abc", "oil_temp": "400"})
    page.click("button[value=save]")
    page.wait_for_selector("#device-errors")
    errors = page.inner_text("#device-errors")
    assert "'abc' is not a number" in errors and "400 is above the highest allowed value (150 °C)" in errors
    page.screenshot(path=str(artifacts / "offline-round-problems.png"), full_page=True)

    _fill(page, first)
    page.click("button[value=save]")
    page.wait_for_selector(f"text=Stop 2 of 2: pump {SECOND}")
    page.wait_for_selector("#device-queue li[data-state=waiting]")

    second = _facts(demo_db, SECOND, extra_hours=11)
    _fill(page, second)
    page.click("button[value=save]")
    page.wait_for_selector("#complete-title")
    assert page.locator("form.reading-form").count() == 0  # 'Round complete' replaces the form

    page.reload()  # still no signal: the page and its waiting readings come from the device
    page.wait_for_selector("#device-queue li[data-state=waiting] >> nth=1")
    assert page.locator("#device-queue li[data-state=waiting]").count() == 2
    assert "waiting to send" in page.inner_text("#device-queue")
    assert _stored(demo_db, FIRST, first["hours"]) == [] and _stored(demo_db, SECOND, second["hours"]) == []
    page.screenshot(path=str(artifacts / "offline-round-waiting.png"), full_page=True)

    context.set_offline(False)
    page.wait_for_selector("#device-queue li[data-state=stored] >> nth=1", timeout=30000)
    assert page.locator("#device-queue li[data-state=waiting]").count() == 0
    page.screenshot(path=str(artifacts / "offline-round-sent.png"), full_page=True)
    one, two = _stored(demo_db, FIRST, first["hours"]), _stored(demo_db, SECOND, second["hours"])
    assert len(one) == 1 and len(two) == 1
    assert one[0].client_id and two[0].client_id and one[0].client_id != two[0].client_id
    assert one[0].source == "api"

    # A second page sending again (another tab, a reload mid-send) stores nothing twice.
    statuses = page.evaluate("""async () => {
      const token = (await (await fetch('/rounds/session.json')).json()).csrf_token;
      const kept = await new Promise((resolve) => {
        const open = indexedDB.open('fleet-rounds', 1);
        open.onsuccess = () => { const get = open.result.transaction('readings').objectStore('readings').getAll();
                                 get.onsuccess = () => resolve(get.result); };
      });
      return Promise.all(kept.map((r) => fetch('/api/readings', {method: 'POST',
        headers: {'Content-Type': 'application/json', 'X-CSRFToken': token},
        body: JSON.stringify({...r.body, client_id: r.client_id, taken_by: 'test-technician'})})
        .then((response) => response.status)));
    }""")
    assert statuses == [200, 200]  # answered as repeats
    assert len(_stored(demo_db, FIRST, first["hours"])) == 1 and len(_stored(demo_db, SECOND, second["hours"])) == 1


def test_the_device_reads_a_decimal_comma_only_where_the_form_allows_it(live_app, page, context, base_url, demo_db,
                                                                        browser_login):
    browser_login("technician")
    _open_route_then_lose_signal(page, context, base_url, "Comma walk")
    values = _facts(demo_db, FIRST)
    _fill(page, {**values, "oil_temp": "48,5"})
    page.click("button[value=check]")
    page.wait_for_selector("#device-errors")
    assert "Oil temperature: '48,5' is not a number" in page.inner_text("#device-errors")  # the default: no comma
    page.evaluate("() => document.querySelector('form.reading-form').setAttribute('data-decimal-comma', '')")
    page.click("button[value=check]")
    page.wait_for_selector("text=All values look plausible. Nothing kept yet.")
    assert page.locator("#device-errors").count() == 0
    assert _stored(demo_db, FIRST, values["hours"]) == []  # 'Check only' keeps nothing, here or on the server
    assert page.locator("#device-queue li").count() == 0


def test_the_servers_verdict_on_a_kept_reading_is_shown(live_app, page, context, base_url, demo_db, browser_login):
    """A reading kept with no signal of a pump that the register moved meanwhile is refused, and the device says
    why and keeps it listed."""
    browser_login("technician")
    _open_route_then_lose_signal(page, context, base_url, "Verdict walk")
    values = _facts(demo_db, FIRST)
    _fill(page, values)
    page.click("button[value=save]")
    page.wait_for_selector("#device-queue li[data-state=waiting]")
    with demo_db.sessions() as session, session.begin():  # meanwhile the pump goes to another position
        installation = session.scalar(select(Installation).join(Pump, Pump.id == Installation.pump_id)
                                      .where(Pump.serial == FIRST, Installation.removed_at.is_(None)))
        installation.position_id = session.scalar(select(Position.id).where(Position.id != installation.position_id)
                                                  .limit(1))
    context.set_offline(False)
    page.wait_for_selector("#device-queue li[data-state=refused]", timeout=30000)
    verdict = page.inner_text("#device-queue li[data-state=refused]")
    assert "not stored" in verdict and f"pump {FIRST} was moved" in verdict
    assert page.is_visible("#device-queue li[data-state=refused] button:has-text('Remove from this list')")
    assert _stored(demo_db, FIRST, values["hours"]) == []


def test_a_browser_that_claims_signal_keeps_the_reading_when_the_server_does_not_answer(live_app, page, context,
                                                                                        base_url, demo_db,
                                                                                        browser_login):
    """navigator.onLine is true on a Wi-Fi with no way to the server: the form asks the server before it posts, and
    keeps the reading on the device when no answer comes, rather than posting into nothing and losing what was
    typed; it is sent once the server answers, with no 'online' event."""
    browser_login("technician")
    context.add_init_script("Object.defineProperty(Navigator.prototype, 'onLine', {get: () => true});")
    _open_route_then_lose_signal(page, context, base_url, "Wi-Fi without a way out")
    page.goto(page.url.split("?")[0] + "?stop=1")  # the stop as the device keeps it; the browser says online
    page.wait_for_selector(f"text=Stop 1 of 1: pump {FIRST}")
    assert page.evaluate("navigator.onLine") is True
    values = _facts(demo_db, FIRST)
    _fill(page, values)
    page.click("button[value=save]")
    page.wait_for_selector("#device-queue li[data-state=waiting]")
    assert _stored(demo_db, FIRST, values["hours"]) == []
    context.set_offline(False)
    page.wait_for_selector("#device-queue li[data-state=stored]", timeout=30000)
    assert len(_stored(demo_db, FIRST, values["hours"])) == 1


def test_with_no_signal_the_device_reads_the_sites_clock_and_asks_about_a_fast_meter(live_app, page, context,
                                                                                      base_url, demo_db, browser_login):
    """A site six hours behind UTC (America/Chicago in winter; reference: Python's zoneinfo, IANA tz database):
    the form's local time is stored as the same moment in UTC, and an hour meter running far ahead of the clock
    gets the server's look-again question on the device (fleet/io/meter.py's allowance, sent as data)."""
    from datetime import UTC, datetime
    from zoneinfo import ZoneInfo

    from fleet.services.transfer.importing import import_table
    from fleet.services.writes import perform
    from tests.test_site_zones import _cells

    zone = "America/Chicago"
    perform(demo_db.sessions, lambda s: import_table(s, "sites", _cells([{"site": "East Yard", "time_zone": zone}])))
    browser_login("technician")
    _open_route_then_lose_signal(page, context, base_url, "Walk on the site's clock")
    moment = datetime.now(UTC).replace(second=0, microsecond=0)
    wall = moment.astimezone(ZoneInfo(zone)).strftime("%Y-%m-%dT%H:%M")
    values = _facts(demo_db, FIRST, extra_hours=5000)  # 5000 h on the meter since a reading days ago
    _fill(page, {**values, "taken_at": wall})
    page.click("button[value=check]")
    page.wait_for_selector("#device-doubts, .has-doubt", timeout=10000)
    assert "Running hours advanced 5000 h" in page.inner_text("body")
    values = _facts(demo_db, FIRST, extra_hours=3)
    _fill(page, {**values, "taken_at": wall})
    page.click("button[value=save]")
    page.wait_for_selector("#complete-title, #device-queue li[data-state=waiting]")
    context.set_offline(False)
    page.wait_for_selector("#device-queue li[data-state=stored]", timeout=30000)
    with demo_db.sessions() as session:
        stored = session.scalar(select(Reading.taken_at).join(Pump, Pump.id == Reading.pump_id)
                                .where(Pump.serial == FIRST, Reading.hours == float(values["hours"])))
    assert stored == moment.replace(tzinfo=None)


def test_with_no_signal_a_pressure_above_rated_carries_its_caution(live_app, page, context, base_url, demo_db,
                                                                  browser_login):
    """The device asks the server's look-again question about a pressure above rated, with the same caution the
    server shows beside it (fleet.safety, sent in the route's rules); a hot pump keeps its own caution only."""
    from fleet.safety import HOT_OIL_CAUTION, OVER_PRESSURE_CAUTION

    browser_login("technician")
    _open_route_then_lose_signal(page, context, base_url, "Pressure walk")
    values = _facts(demo_db, FIRST)
    _fill(page, {**values, "outlet_pressure": f"{1.3 * float(values['outlet_pressure']) / 0.8:.0f}"})
    page.click("button[value=check]")
    page.wait_for_selector("#device-doubts", timeout=10000)
    doubts = page.inner_text("#device-doubts")
    assert "above the rated" in doubts and OVER_PRESSURE_CAUTION in doubts and HOT_OIL_CAUTION not in doubts
    _fill(page, {**values, "oil_temp": "95"})
    page.click("button[value=check]")
    page.wait_for_selector(f"#device-doubts:has-text('{HOT_OIL_CAUTION[:30]}')", timeout=10000)
    assert OVER_PRESSURE_CAUTION not in page.inner_text("#device-doubts")


def test_with_no_signal_a_refused_value_is_named_by_its_label_and_so_is_the_servers_verdict(
        live_app, page, context, base_url, demo_db, browser_login):
    """The device listed 'outlet pressure: ...', 'speed: ...', 'taken at: ...' (the program's names), and so did the
    server's verdict on a kept reading; both now name each field as the form's own <label> does, the device's list
    linking to the field. A refused time is not asked about as well."""
    from datetime import timedelta

    from fleet.services.rounds import LABELS
    from fleet.timeutil import utcnow

    browser_login("technician")
    _open_route_then_lose_signal(page, context, base_url, "Label walk")
    page.wait_for_function("!navigator.onLine")
    values = _facts(demo_db, FIRST)
    later = (utcnow() + timedelta(days=2)).strftime("%Y-%m-%dT%H:%M")
    bad = {"outlet_pressure": "-5", "speed": "0", "oil_temp": "warm", "taken_at": later}
    _fill(page, {**values, **bad})
    page.click("button[value=check]")
    page.wait_for_selector("#device-errors")
    listed = page.eval_on_selector_all("#device-errors li", """items => items.map((li) => {
      const link = li.querySelector('a');
      return [link ? link.getAttribute('href') : null, link ? link.textContent : null, li.textContent];
    })""")
    assert sorted(href or "" for href, _, _ in listed) == sorted(f"#f-{name}" for name in bad)
    for href, label, text in listed:
        name = href[len("#f-"):]
        assert label == LABELS[name] == page.eval_on_selector(
            f"label[for=f-{name}]", "l => l.firstChild.textContent.trim()")  # the words the form shows
        assert text.startswith(f"{label}: ") and not text.startswith(name.replace("_", " "))
    assert page.locator("#device-doubts").count() == 0  # the time refused, not also asked about
    assert page.locator("#device-queue li").count() == 0

    # A kept reading the server refuses (kept by a device with older rules): its verdict names the fields too.
    context.set_offline(False)
    page.evaluate("""([place, hours]) => new Promise((resolve, reject) => {
      const open = indexedDB.open('fleet-rounds', 1);
      open.onsuccess = () => {
        const tx = open.result.transaction('readings', 'readwrite');
        tx.objectStore('readings').put({client_id: crypto.randomUUID(), route: Number(location.pathname.split('/')[2]),
          stop: 1, pump: 'EY-104', state: 'waiting', verdict: '', kept_at: new Date().toISOString(),
          body: {pump: 'EY-104', taken_at: new Date().toISOString().slice(0, 16).replace('T', ' '), place,
                 hours: {value: hours, unit: 'h'}, outlet_pressure: {value: -5, unit: 'bar'},
                 speed: {value: 0, unit: 'rpm'}, oil_temp: {value: 48, unit: 'degC'}}});
        tx.oncomplete = () => resolve(true);
        tx.onerror = () => reject(tx.error);
      };
    })""", [page.eval_on_selector("form.reading-form", "f => JSON.parse(f.dataset.place)"), float(values["hours"])])
    page.reload()
    page.wait_for_selector("#device-queue li[data-state=refused]", timeout=30000)
    verdict = page.inner_text("#device-queue li[data-state=refused]")
    assert f"{LABELS['outlet_pressure']}: -5 is below the lowest allowed value" in verdict
    assert f"{LABELS['speed']}: 0 is below the lowest allowed value" in verdict
    assert not any(f"{sep}{name}:" in verdict for sep in (": ", "; ") for name in ("outlet pressure", "speed"))
    assert _stored(demo_db, FIRST, values["hours"]) == []


def test_with_no_signal_the_devices_doubts_are_the_servers_words_in_the_sites_units(live_app, page, context,
                                                                                   base_url, demo_db, browser_login):
    """At a site that works in psi, US gal/min and °F on Chicago time, the device's look-again questions are the
    server's own messages (fleet.services.rounds.plausibility_warnings) word for word, each value in the unit it was
    typed in, its decimals as the server writes them. The typed values are converted to the canonical ones the
    server checks by pint (the reference, after NIST SP 811), the site's time by zoneinfo (IANA tz database)."""
    from datetime import UTC, datetime, timedelta
    from zoneinfo import ZoneInfo

    import pandas as pd
    from pint import UnitRegistry

    from fleet.services.rounds import plausibility_warnings, pump_facts
    from fleet.services.sitelocal import of_pump
    from fleet.services.transfer.importing import import_table
    from fleet.services.writes import perform

    ureg = UnitRegistry()
    row = {"site": "East Yard", "pressure_unit": "psi", "flow_unit": "gal/min", "temperature_unit": "degF",
           "time_zone": "America/Chicago"}
    perform(demo_db.sessions, lambda s: import_table(s, "sites", pd.DataFrame([row], dtype=str)))
    browser_login("technician")
    _open_route_then_lose_signal(page, context, base_url, "Walk in psi")
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == FIRST))
        facts = pump_facts(session, pump)
        site = of_pump(session, pump)
    psi = ureg.Quantity(1.25 * facts.rated_pressure_bar, "bar").to("psi").magnitude
    gpm = ureg.Quantity(1.1 * pump.displacement_cc * pump.rated_speed_rpm / 1000, "L/min").to("gal/min").magnitude
    degf = ureg.Quantity(facts.oil_temp_max_c + 8, "degC").to("degF").magnitude
    typed = {"hours": f"{facts.last_hours + 5000:.0f}", "speed": f"{pump.rated_speed_rpm:.0f}",
             "outlet_pressure": f"{psi:.1f}", "outlet_flow": f"{gpm:.2f}", "oil_temp": f"{degf:.1f}"}
    _fill(page, typed)
    page.click("button[value=check]")
    page.wait_for_selector("#device-doubts", timeout=10000)
    shown = page.inner_text("#device-doubts")
    wall = datetime.strptime(page.input_value("#f-taken_at"), "%Y-%m-%dT%H:%M")  # the site's clock
    at = wall.replace(tzinfo=ZoneInfo(site.time_zone or "UTC")).astimezone(UTC).replace(tzinfo=None)
    reading = {"taken_at": at, "hours": float(typed["hours"]), "speed": float(typed["speed"]), "stroke": None,
               "outlet_pressure": ureg.Quantity(float(typed["outlet_pressure"]), "psi").to("bar").magnitude,
               "outlet_flow": ureg.Quantity(float(typed["outlet_flow"]), "gal/min").to("L/min").magnitude,
               "oil_temp": ureg.Quantity(float(typed["oil_temp"]), "degF").to("degC").magnitude}
    expected = plausibility_warnings(facts, reading, at, site)
    assert {d.code for d in expected} == {"flow_above_theoretical", "pressure_above_rated",
                                          "temperature_outside_limits", "hours_faster_than_clock"}
    for doubt in expected:
        assert doubt.message in shown, (doubt.message, shown)
    assert all(unit in shown for unit in ("psi", "°F", "US gal/min"))
    # A time half an hour ahead of the site's clock (inside the hour allowed): the same question, with the site's
    # offset from UTC written as the server writes it (the device's minute, or the one before if it turned).
    _fill(page, {"taken_at": f"{wall + timedelta(minutes=30):%Y-%m-%dT%H:%M}"})
    page.click("button[value=check]")
    page.wait_for_selector("#device-doubts:has-text('is later than now')", timeout=10000)
    shown = page.inner_text("#device-doubts")
    checked = datetime.now(UTC).replace(tzinfo=None, second=0, microsecond=0)
    ahead = {**reading, "taken_at": at + timedelta(minutes=30)}
    future = [[d.message for d in plausibility_warnings(facts, ahead, moment, site) if d.code == "time_in_future"]
              for moment in (checked, checked - timedelta(minutes=1))]
    assert any(messages and messages[0] in shown for messages in future), (future, shown)


def test_with_no_signal_a_theoretical_flow_on_a_tie_is_written_as_the_server_writes_it(live_app, page, context,
                                                                                      base_url, demo_db,
                                                                                      browser_login):
    """25 cm3/rev at 1450 rpm is exactly 36.25 L/min (Q = Vg n / 1000): Python's format writes the tie to the even
    digit, 36.2, where JavaScript's toFixed writes 36.3; the device's question is the server's, to the digit."""
    from fleet.services.rounds import plausibility_warnings, pump_facts
    from fleet.services.sitelocal import of_pump

    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == FIRST))
        facts, site = pump_facts(session, pump), of_pump(session, pump)
    assert pump.displacement_cc == 25.0  # the invented demo pump this check is built on
    browser_login("technician")
    _open_route_then_lose_signal(page, context, base_url, "Walk on a tie")
    values = {**_facts(demo_db, FIRST), "speed": "1450", "outlet_flow": "40"}
    _fill(page, values)
    page.click("button[value=check]")
    page.wait_for_selector("#device-doubts", timeout=10000)
    reading = {"taken_at": None, "hours": None, "outlet_pressure": None, "oil_temp": None, "stroke": None,
               "speed": 1450.0, "outlet_flow": 40.0}
    [expected] = plausibility_warnings(facts, reading, facts.last_taken_at, site)
    assert "theoretical 36.2 L/min" in expected.message
    assert expected.message in page.inner_text("#device-doubts")
