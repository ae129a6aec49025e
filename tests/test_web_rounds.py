"""Rounds: routes, the quick reading form, its check step, kept values, units in a cookie, and saving."""

import csv
import io
from datetime import datetime, timedelta

import pytest
from sqlalchemy import func, select

from fleet.db.models import AnalysisResult, Installation, Pump, Reading, Route
from fleet.services.rounds import PumpFacts, plausibility_warnings
from fleet.timeutil import utcnow

# Invented demo plant: EY-104 internal gear (rated 200 bar), EY-105 vane (rated 140 bar); neither has a drain.
FIRST, SECOND = "EY-104", "EY-105"


def _demo(demo_db, statement):
    with demo_db.sessions() as session:
        return session.execute(statement).all()


def _make_route(client, pumps=(FIRST, SECOND), name="Morning walk") -> str:
    response = client.post("/rounds", data={"name": name, "pumps": "\n".join(pumps)})
    assert response.status_code == 302
    return response.headers["Location"]


def _facts(demo_db, serial):
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == serial))
        last = session.execute(select(Reading.taken_at, Reading.hours).where(Reading.pump_id == pump.id)
                               .order_by(Reading.taken_at.desc()).limit(1)).one()
        return pump.displacement_cc, pump.rated_pressure_bar, pump.rated_speed_rpm, last.taken_at, last.hours


def _plausible_form(demo_db, serial, **changes) -> dict:
    """Values a healthy pump would give: 90 % of theoretical flow at rated speed, a little below rated pressure."""
    vg, p_rated, n_rated, last_at, last_hours = _facts(demo_db, serial)
    form = {"taken_at": (utcnow() - timedelta(minutes=5)).strftime("%Y-%m-%dT%H:%M"),
            "hours": f"{last_hours + 12:.1f}", "outlet_pressure": f"{0.8 * p_rated:.1f}", "outlet_pressure_unit": "bar",
            "speed": f"{n_rated:.0f}", "speed_unit": "rpm", "outlet_flow": f"{0.9 * vg * n_rated / 1000:.2f}",
            "outlet_flow_unit": "L/min", "oil_temp": "50", "oil_temp_unit": "degC", "taken_by": "T. Test"}
    form.update(changes)
    return form


def _readings_of(demo_db, serial) -> int:
    return _demo(demo_db, select(func.count()).select_from(Reading).join(Pump, Pump.id == Reading.pump_id)
                 .where(Pump.serial == serial))[0][0]


def test_rounds_page_offers_one_route_per_machine_when_none_exist(client, demo_db):
    assert _demo(demo_db, select(func.count()).select_from(Route))[0][0] == 0
    response = client.get("/rounds")
    html = response.get_data(as_text=True)
    assert response.status_code == 200
    assert "Before you work on a pump" in html  # the safety caution
    data = client.get("/rounds.json").get_json()
    assert set(data) == {"routes", "rows", "suggested", "pumps"}
    assert data["routes"] == [] and len(data["suggested"]) >= 4
    for suggestion in data["suggested"]:
        assert f"Use route {suggestion['name']}" in html
        assert set(suggestion) == {"name", "pumps"} and suggestion["pumps"]
    installed = _demo(demo_db, select(Pump.serial).join(Installation, Installation.pump_id == Pump.id)
                      .where(Installation.removed_at.is_(None)))
    suggested = [serial for s in data["suggested"] for serial in s["pumps"]]
    assert sorted(suggested) == sorted(serial for (serial,) in installed)  # every installed pump, once
    assert client.get("/rounds.csv").get_data(as_text=True) == "id,name,stops,pumps\n"


def test_creating_a_route_keeps_the_walking_order(client, demo_db):
    location = _make_route(client, pumps=(SECOND, FIRST))
    with demo_db.sessions() as session:
        route = session.scalar(select(Route).where(Route.name == "Morning walk"))
        assert [stop.pump.serial for stop in route.stops] == [SECOND, FIRST]
        assert location.endswith(f"/rounds/{route.id}")
    rows = list(csv.DictReader(io.StringIO(client.get("/rounds.csv").get_data(as_text=True))))
    assert rows == [{"id": str(route.id), "name": "Morning walk", "stops": "2", "pumps": f"{SECOND} | {FIRST}"}]
    walk = client.get(f"/rounds/{route.id}.json").get_json()
    assert set(walk) == {"route", "stops"}
    assert set(walk["stops"][0]) == {"number", "pump", "kind_label", "site", "machine", "position",
                                     "last_reading_at", "last_hours", "read_today"}
    header = client.get(f"/rounds/{route.id}.csv").get_data(as_text=True).splitlines()[0]
    assert header == "number,pump,kind_label,site,machine,position,last_reading_at,last_hours,read_today"


def test_a_bad_route_is_refused_with_the_typed_values_kept(client, demo_db):
    response = client.post("/rounds", data={"name": "", "pumps": f"{FIRST}\nNOPE-9\n{FIRST}", "note": "east side"})
    html = response.get_data(as_text=True)
    assert response.status_code == 422
    for reason in ("give the route a name", "no pump &#39;NOPE-9&#39; in the register",
                   f"pump &#39;{FIRST}&#39; is listed twice"):
        assert reason in html
    assert f"{FIRST}\nNOPE-9\n{FIRST}</textarea>" in html and 'value="east side"' in html
    assert _demo(demo_db, select(func.count()).select_from(Route))[0][0] == 0


def test_the_quick_form_is_made_for_phones_and_keyboards(client):
    html = client.get(_make_route(client)).get_data(as_text=True)
    assert f"Stop 1 of 2: pump {FIRST}" in html
    assert html.count('inputmode="decimal"') == 5  # hours, pressure, speed, flow, temperature (no drain port)
    assert 'name="outlet_pressure_unit"' in html and '<option value="psi">' in html
    assert 'name="oil_temp_unit"' in html and '<option value="degF">' in html
    assert "tabindex" not in html  # document order is the tab order
    # Enter presses the first submit button: it must be the one that checks before saving.
    first_button = html[html.index('<button type="submit"', html.index('class="reading-form"')):]
    assert first_button.startswith('<button type="submit" name="action" value="save"')
    assert "Before you work on a pump" in html


def test_a_variable_pump_s_form_says_what_its_displacement_setting_is_for(client):
    """EY-101 (invented demo plant) is a variable pump: its form asks for the displacement setting and says that a
    reading without it is kept but cannot count in the trends (fleet.trend.referral flags it so)."""
    html = client.get(_make_route(client, pumps=("EY-101",), name="Piston walk")).get_data(as_text=True)
    assert 'id="f-stroke"' in html and 'aria-describedby="h-stroke"' in html
    assert 'id="h-stroke"' in html and "left out of the trends" in html
    fixed = client.get(_make_route(client, name="Gear walk")).get_data(as_text=True)
    assert 'id="f-stroke"' not in fixed and 'id="h-stroke"' not in fixed


def test_hard_errors_reshow_the_form_with_every_typed_value(client, demo_db):
    location = _make_route(client)
    before = _readings_of(demo_db, FIRST)
    form = _plausible_form(demo_db, FIRST, hours="12a4", outlet_pressure="2200", outlet_pressure_unit="psi",
                           note="leak at flange")
    response = client.post(f"{location}/stops/1", data=form)
    html = response.get_data(as_text=True)
    assert response.status_code == 422
    assert "Not saved." in html and "&#39;12a4&#39; is not a number" in html
    for field in ("hours", "outlet_pressure", "speed", "outlet_flow", "oil_temp", "taken_by", "note"):
        assert f'value="{form[field]}"' in html, field
    assert f'value="{form["taken_at"]}"' in html
    assert '<option value="psi" selected>' in html  # the chosen unit is kept too
    assert _readings_of(demo_db, FIRST) == before


def test_a_plausible_reading_is_saved_converted_and_reanalysed(client, demo_db):
    location = _make_route(client)
    vg, p_rated, n_rated, _, last_hours = _facts(demo_db, FIRST)
    with demo_db.sessions() as session:
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == FIRST))
        analysed_before = session.get(AnalysisResult, pump_id).computed_at
    # 2200 psi = 151.685 bar and 140 degF = 60 degC (NIST SP 811 factors, as pint defines them).
    form = _plausible_form(demo_db, FIRST, outlet_pressure="2200", outlet_pressure_unit="psi", oil_temp="140",
                           oil_temp_unit="degF")
    response = client.post(f"{location}/stops/1", data=form)
    assert response.status_code == 302 and response.headers["Location"].endswith("?stop=2")
    with demo_db.sessions() as session:
        stored = session.scalars(select(Reading).where(Reading.pump_id == pump_id)
                                 .order_by(Reading.taken_at.desc())).first()
        assert stored.source == "form" and stored.taken_by == "T. Test"
        assert stored.pressure_bar == pytest.approx(2200 * 0.0689475729, rel=1e-9)
        assert stored.temp_c == pytest.approx(60.0, abs=1e-9)
        assert stored.hours == pytest.approx(last_hours + 12, abs=0.05)
        assert session.get(AnalysisResult, pump_id).computed_at > analysed_before
    # The units chosen are remembered for this browser and offered first next time.
    cookie = client.get_cookie("fleet_units")
    assert cookie is not None and "outlet_pressure=psi" in cookie.value and "oil_temp=degF" in cookie.value
    html = client.get(response.headers["Location"]).get_data(as_text=True)
    assert "Saved the reading of EY-104" in html and f"Stop 2 of 2: pump {SECOND}" in html
    assert '<option value="psi" selected>' in html and '<option value="degF" selected>' in html
    assert "✓ read today" in html


def test_doubtful_values_are_shown_before_saving_and_can_be_confirmed(client, demo_db):
    location = _make_route(client)
    vg, p_rated, n_rated, last_at, last_hours = _facts(demo_db, FIRST)
    before = _readings_of(demo_db, FIRST)
    form = _plausible_form(demo_db, FIRST, hours=f"{last_hours - 100:.1f}", outlet_pressure=f"{p_rated + 15:.1f}",
                           outlet_flow=f"{1.02 * vg * n_rated / 1000:.2f}", oil_temp="95")
    response = client.post(f"{location}/stops/1", data=form)
    html = response.get_data(as_text=True)
    assert response.status_code == 200 and "Please look again before saving." in html
    for words in ("is above the theoretical", f"is above the rated {p_rated:.0f} bar", "outside this pump&#39;s limits",
                  "are below the last reading&#39;s"):
        assert words in html
    assert '<button type="submit" name="action" value="confirm" class="quiet">Save as typed</button>' in html
    assert _readings_of(demo_db, FIRST) == before
    codes = "flow_above_theoretical,hours_backwards,pressure_above_rated,temperature_outside_limits"
    assert f'name="confirmed" value="{codes}"' in html
    # Confirming, with the very values that were checked, saves them.
    saved = client.post(f"{location}/stops/1", data={**form, "action": "confirm", "confirmed": codes})
    assert saved.status_code == 302
    assert _readings_of(demo_db, FIRST) == before + 1


def test_confirming_does_not_cover_a_new_doubt(client, demo_db):
    location = _make_route(client)
    _, p_rated, _, _, _ = _facts(demo_db, FIRST)
    form = _plausible_form(demo_db, FIRST, outlet_pressure=f"{p_rated + 15:.1f}", oil_temp="95")
    response = client.post(f"{location}/stops/1",
                           data={**form, "action": "confirm", "confirmed": "pressure_above_rated"})
    assert response.status_code == 200 and "outside this pump&#39;s limits" in response.get_data(as_text=True)


def test_check_only_saves_nothing(client, demo_db):
    location = _make_route(client)
    before = _readings_of(demo_db, FIRST)
    response = client.post(f"{location}/stops/1", data={**_plausible_form(demo_db, FIRST), "action": "check"})
    assert response.status_code == 200 and "All values look plausible. Nothing saved yet." in response.get_data(
        as_text=True)
    assert _readings_of(demo_db, FIRST) == before


def test_plausibility_rules_use_theoretical_flow_and_the_pump_limits():
    facts = PumpFacts(displacement_cc=45.0, rated_pressure_bar=200.0, oil_temp_min_c=10.0, oil_temp_max_c=80.0,
                      last_taken_at=datetime(2026, 1, 1), last_hours=1000.0)
    now = datetime(2026, 1, 2, 12, 0)
    # Synthetic check values (domain notes, computed): 45 cm3/rev at 1500 rpm -> 67.5 L/min theoretical.
    ok = {"taken_at": now, "hours": 1010.0, "outlet_pressure": 200.0, "speed": 1500.0, "outlet_flow": 67.5,
          "oil_temp": 80.0, "stroke": None}
    assert plausibility_warnings(facts, ok, now) == []
    doubtful = {**ok, "outlet_flow": 67.6, "outlet_pressure": 200.1, "oil_temp": 9.9, "hours": 999.0,
                "taken_at": now + timedelta(minutes=20)}
    codes = [w.code for w in plausibility_warnings(facts, doubtful, now)]
    assert codes == ["flow_above_theoretical", "pressure_above_rated", "temperature_outside_limits",
                     "hours_backwards", "time_in_future"]
    # A variable pump at half stroke has half the theoretical flow: 33.75 L/min.
    half = {**ok, "stroke": 0.5, "outlet_flow": 34.0}
    assert [w.code for w in plausibility_warnings(facts, half, now)] == ["flow_above_theoretical"]


def test_a_reading_far_in_the_future_is_a_hard_error(client, demo_db):
    location = _make_route(client)
    later = (utcnow() + timedelta(days=2)).strftime("%Y-%m-%dT%H:%M")
    response = client.post(f"{location}/stops/1", data=_plausible_form(demo_db, FIRST, taken_at=later))
    assert response.status_code == 422 and "is in the future" in response.get_data(as_text=True)


def test_unknown_route_and_stop_are_404(client):
    assert client.get("/rounds/999").status_code == 404
    location = _make_route(client)
    assert client.post(f"{location}/stops/3", data={}).status_code == 404


def test_a_refused_reading_names_each_field_as_the_form_labels_it(client, demo_db):
    """'Not saved' listed 'outlet pressure: ...', 'oil temp: ...', 'taken at: ...', the program's names; each
    problem is now listed under the label its field has on the form, linked to the field."""
    import re

    from fleet.services.rounds import LABELS

    location = _make_route(client, pumps=(FIRST,))
    later = (utcnow() + timedelta(days=2)).strftime("%Y-%m-%dT%H:%M")
    bad = {"outlet_pressure": "-5", "speed": "0", "oil_temp": "warm", "outlet_flow": "abc", "taken_at": later,
           "hours": ""}
    response = client.post(f"{location}/stops/1", data=_plausible_form(demo_db, FIRST, **bad))
    assert response.status_code == 422
    html = response.get_data(as_text=True)
    summary = html[html.index('id="form-errors"'):html.index("</div>", html.index('id="form-errors"'))]
    listed = re.findall(r'<li><a href="#f-(\w+)">([^<]+)</a>: ', summary)
    assert sorted(name for name, _ in listed) == sorted(bad)  # every refused value once
    for name, label in listed:
        assert label == LABELS[name]  # the words of the field's own <label>
        assert re.search(rf'<label for="f-{name}">{re.escape(label)}[ <]', html), name
    for program_name in ("outlet pressure", "oil temp", "outlet flow", "taken at", "hours", "speed"):
        assert f">{program_name}</a>" not in summary and f"<li>{program_name}:" not in summary
    # Each problem also stands beside its field.
    assert re.search(r'id="n-outlet_pressure">-5 is below the lowest allowed value', html)



def test_a_problems_column_is_named_by_its_label_with_or_without_a_unit():
    from fleet.services.rounds import FORM_FIELDS, label_of

    flow = next(f.label for f in FORM_FIELDS if f.name == "outlet_flow")
    assert label_of("outlet_flow [gal/min]") == label_of("outlet_flow") == flow
    assert label_of("taken_at") == "Local time"
    assert label_of("place") is None and label_of("pump") is None and label_of("") is None  # no input of the form
