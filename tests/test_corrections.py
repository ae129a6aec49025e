"""Correcting a reading through every door (the reading's page, PATCH /api/readings/<id>, `fleet reading
correct`): who may, the reason, the old values in the audit trail, the re-analysis, and where corrections show.
Invented demo plant."""

from datetime import timedelta

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import select

from fleet.cli import main
from fleet.db.models import AnalysisResult, AuditRecord, Pump, PumpDataVersion, Reading
from fleet.timeutil import utcnow
from tests.conftest import csrf_token_of
from tests.test_write_invariant import assert_stored_equals_full

SERIAL = "EY-101"  # invented demo pump (internal gear, no case drain)


def _add_reading(demo_db, taken_by: str, age: timedelta) -> tuple[int, float]:
    """A reading of SERIAL taken ``age`` ago by ``taken_by``, through the API as a technician would send it."""
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == SERIAL))
        last = session.scalar(select(Reading.hours).where(Reading.pump_id == pump.id)
                              .order_by(Reading.taken_at.desc()).limit(1))
        values = {"pump_id": pump.id, "pressure_bar": 0.8 * pump.rated_pressure_bar,
                  "speed_rpm": pump.rated_speed_rpm}
    from fleet.db.transaction import run_write

    def add(session):
        reading = Reading(taken_at=(utcnow() - age).replace(microsecond=0), hours=last + 5.0, temp_c=50.0,
                          taken_by=taken_by, source="form", **values)
        session.add(reading)
        session.flush()
        return reading.id

    return run_write(demo_db.sessions, add), last + 5.0


def _reading(demo_db, reading_id) -> Reading:
    with demo_db.sessions() as session:
        return session.get(Reading, reading_id)


def _version(demo_db) -> int:
    with demo_db.sessions() as session:
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == SERIAL))
        row = session.get(PumpDataVersion, pump_id)
        return row.version if row else 0


def _page(reading_id) -> str:
    return f"/pumps/{SERIAL}/readings/{reading_id}"


def test_an_engineer_corrects_on_the_readings_page(client, demo_db):
    reading_id, hours = _add_reading(demo_db, "A. Other", timedelta(days=30))
    version = _version(demo_db)
    page = client.get(_page(reading_id))
    html = page.get_data(as_text=True)
    assert page.status_code == 200 and 'id="correction-form"' in html and "has not been corrected" in html
    form = {"hours": repr(hours), "outlet_pressure": "2900", "outlet_pressure_unit": "psi", "speed": "",
            "oil_temp": "50.0", "reason": "pressure gauge read in psi, typed as bar"}
    form["speed"] = repr(_reading(demo_db, reading_id).speed_rpm)
    saved = client.post(_page(reading_id), data=form)
    assert saved.status_code == 302
    stored = _reading(demo_db, reading_id)
    # 2900 psi = 199.948 bar (NIST SP 811: 1 psi = 6894.757 Pa; pint defines it so).
    assert stored.pressure_bar == pytest.approx(199.948, abs=0.001)
    assert stored.hours == hours and stored.temp_c == 50.0  # untouched fields are no corrections
    with demo_db.sessions() as session:
        record = session.scalar(select(AuditRecord).where(AuditRecord.table_name == "reading",
                                                          AuditRecord.row_id == reading_id))
        assert record.action == "update" and record.actor == "test-engineer"
        assert record.reason == "pressure gauge read in psi, typed as bar"
        assert record.before["pressure_bar"] != record.after["pressure_bar"]
        assert record.before["hours"] == record.after["hours"]
    assert _version(demo_db) > version  # the pump's data moved on: re-analysed by the one write path
    assert_stored_equals_full(demo_db)
    after = client.get(_page(reading_id)).get_data(as_text=True)
    assert "pressure gauge read in psi, typed as bar" in after and "outlet_pressure" in after
    twin = client.get(_page(reading_id) + ".json").get_json()
    assert [c["field"] for c in twin["corrections"]] == ["outlet_pressure"]


def test_the_pump_page_marks_corrected_readings_in_html_json_and_csv(client, demo_db):
    reading_id, _ = _add_reading(demo_db, "A. Other", timedelta(days=3))
    response = client.patch(f"/api/readings/{reading_id}", json={"oil_temp": 55, "reason": "thermometer re-read"})
    assert response.status_code == 200
    rows = client.get(f"/pumps/{SERIAL}.json").get_json()["readings"]
    flags = {row["reading_id"]: row["corrected"] for row in rows}
    assert flags[reading_id] is True and sum(flags.values()) == 1
    csv_lines = client.get(f"/pumps/{SERIAL}.csv").get_data(as_text=True).splitlines()
    header = csv_lines[0].split(",")
    assert header[-1] == "corrected"
    marked = [line for line in csv_lines[1:] if line.startswith(f"{reading_id},")]
    assert marked and marked[0].endswith(",True")
    html = client.get(f"/pumps/{SERIAL}").get_data(as_text=True)
    assert f'href="/pumps/{SERIAL}/readings/{reading_id}"' in html and 'class="corrected"' in html


def test_a_correction_without_a_reason_is_refused_on_every_door(client, demo_db):
    reading_id, hours = _add_reading(demo_db, "A. Other", timedelta(days=2))
    page = client.post(_page(reading_id), data={"hours": repr(hours + 1), "reason": "  "})
    assert page.status_code == 422 and "give the reason" in page.get_data(as_text=True)
    api = client.patch(f"/api/readings/{reading_id}", json={"hours": hours + 1})
    assert api.status_code == 422 and api.get_json()["problems"][0]["field"] == "reason"
    with demo_db.sessions() as session:
        assert _reading(demo_db, reading_id).hours == hours
        assert session.scalar(select(AuditRecord).where(AuditRecord.table_name == "reading",
                                                        AuditRecord.row_id == reading_id)) is None


def test_bad_values_are_all_named_and_nothing_changes(client, demo_db):
    reading_id, hours = _add_reading(demo_db, "A. Other", timedelta(days=2))
    response = client.patch(f"/api/readings/{reading_id}",
                            json={"speed": "fast", "oil_temp": 900, "pump": "EY-102", "reason": "tidy up"})
    assert response.status_code == 422
    fields = sorted(p["field"] for p in response.get_json()["problems"])
    assert fields == ["oil_temp", "pump", "speed"]
    unchanged = client.patch(f"/api/readings/{reading_id}", json={"hours": hours, "reason": "same"})
    assert unchanged.status_code == 422 and "nothing to correct" in unchanged.get_json()["problems"][0]["reason"]
    assert client.patch("/api/readings/999999", json={"hours": 1, "reason": "x"}).status_code == 404
    assert client.get(f"/pumps/EY-102/readings/{reading_id}").status_code == 404  # not that pump's reading


def test_the_technician_who_took_it_may_correct_it_within_a_day(web_app, demo_db, login):
    technician = login(web_app.test_client(), "technician")
    own, hours = _add_reading(demo_db, "test-technician", timedelta(hours=20))
    other, _ = _add_reading(demo_db, "A. Other", timedelta(hours=2))
    old, _ = _add_reading(demo_db, "test-technician", timedelta(hours=25))
    ok = technician.patch(f"/api/readings/{own}", json={"hours": hours + 1, "reason": "meter re-read"})
    assert ok.status_code == 200 and ok.get_json()["changes"] == [{"field": "hours", "before": hours,
                                                                   "after": hours + 1}]
    for reading_id, words in ((other, "the technician who took it"), (old, "within a day")):
        refused = technician.patch(f"/api/readings/{reading_id}", json={"hours": 1.0, "reason": "x"})
        assert refused.status_code == 403 and words in refused.get_json()["problems"][0]["reason"]
        form = technician.post(_page(reading_id), data={"hours": "1", "reason": "x"})
        assert form.status_code == 403
        page = technician.get(_page(reading_id)).get_data(as_text=True)
        assert 'id="correction-form"' not in page and 'id="why-not"' in page
    viewer = login(web_app.test_client(), "viewer")
    assert viewer.patch(f"/api/readings/{own}", json={"hours": hours + 2, "reason": "x"}).status_code == 403
    assert _reading(demo_db, own).hours == hours + 1


def test_csrf_is_required_of_a_browser_session(web_app, demo_db, login):
    reading_id, hours = _add_reading(demo_db, "A. Other", timedelta(days=2))
    engineer = login(web_app.test_client(), "engineer")
    token = engineer.environ_base.pop("HTTP_X_CSRFTOKEN")
    assert engineer.post(_page(reading_id), data={"hours": "1", "reason": "x"}).status_code == 403
    assert engineer.patch(f"/api/readings/{reading_id}", json={"hours": 1, "reason": "x"}).status_code == 403
    assert _reading(demo_db, reading_id).hours == hours
    form = engineer.get(_page(reading_id)).get_data(as_text=True)
    assert csrf_token_of(form)
    done = engineer.post(_page(reading_id), data={"hours": repr(hours + 2), "reason": "x",
                                                  "csrf_token": csrf_token_of(form)})
    assert done.status_code == 302 and token


def test_the_command_line_corrects_with_units_and_checks_the_user(demo_db):
    reading_id, hours = _add_reading(demo_db, "test-technician", timedelta(days=3))
    runner = CliRunner()
    base = ["--database", demo_db.url, "reading", "correct", str(reading_id)]
    late = runner.invoke(main, [*base, "--set", "hours=1", "--reason", "x", "--by", "test-technician"])
    assert late.exit_code == 1 and "within a day" in late.output
    nobody = runner.invoke(main, [*base, "--set", "hours=1", "--reason", "x", "--by", "no-such-user"])
    assert nobody.exit_code == 1 and "no active user" in nobody.output
    done = runner.invoke(main, [*base, "--set", "oil_temp=131", "--unit", "oil_temp=degF", "--reason",
                                "read in degF", "--by", "test-engineer", "--json"])
    assert done.exit_code == 0, done.output
    # 131 degF = 55 degC exactly (ITS-90 conversion, as pint defines it).
    assert _reading(demo_db, reading_id).temp_c == pytest.approx(55.0, abs=1e-9)
    with demo_db.sessions() as session:
        record = session.scalar(select(AuditRecord).where(AuditRecord.table_name == "reading",
                                                          AuditRecord.row_id == reading_id))
        assert record.actor == "test-engineer" and record.reason == "read in degF"
        assert session.get(AnalysisResult, record.before["pump_id"]) is not None
    assert_stored_equals_full(demo_db)


def test_the_weekly_review_lists_the_corrections_with_reasons(client, demo_db):
    reading_id, hours = _add_reading(demo_db, "A. Other", timedelta(days=10))
    assert client.patch(f"/api/readings/{reading_id}", json={"hours": hours + 3, "reason": "meter re-read"}
                        ).status_code == 200
    data = client.get("/review.json").get_json()
    corrected = [c for c in data["readings_corrected"] if c["reading_id"] == reading_id]
    assert corrected and corrected[0]["reason"] == "meter re-read" and corrected[0]["by"] == "test-engineer"
    assert corrected[0]["changes"] == [{"field": "hours", "before": hours, "after": hours + 3}]
    html = client.get("/review").get_data(as_text=True)
    assert "meter re-read" in html and f"{hours} → {hours + 3}" in html


_json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**30, 10**30) | st.floats(allow_nan=True) | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner, max_size=3),
    max_leaves=6,
)
_fields = st.sampled_from(["hours", "outlet_pressure", "speed", "outlet_flow", "case_drain_flow", "oil_temp",
                           "stroke", "note", "reason", "pump", "taken_at", "id", "unit", "value"])


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=st.dictionaries(_fields, _json_values, max_size=6) | _json_values)
def test_hostile_correction_bodies_never_cause_a_server_error(client, demo_db, body):
    response = client.patch("/api/readings/1", json=body)
    assert response.status_code in (200, 400, 403, 404, 422) and response.is_json
    if response.status_code != 200:
        assert response.get_json()["problems"]


def test_a_correction_takes_a_decimal_comma_only_where_the_pump_site_allows_it(client, demo_db):
    """Same convention as the site's forms and files (README: decimal comma)."""
    from fleet.db.queries import current_places
    from fleet.services.transfer.importing import import_table
    from fleet.services.writes import perform
    from tests.test_site_zones import _cells

    reading_id, _ = _add_reading(demo_db, "A. Other", timedelta(days=3))
    refused = client.patch(f"/api/readings/{reading_id}", json={"oil_temp": "55,5", "reason": "re-read"})
    assert refused.status_code == 422 and refused.get_json()["problems"][0]["field"] == "oil_temp"
    with demo_db.sessions() as session:
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == SERIAL))
        site_name = current_places(session, [pump_id])[pump_id].site
    perform(demo_db.sessions, lambda s: import_table(s, "sites", _cells([{"site": site_name,
                                                                          "decimal_comma": "true"}])))
    taken = client.patch(f"/api/readings/{reading_id}", json={"oil_temp": "55,5", "reason": "re-read"})
    assert taken.status_code == 200, taken.get_json()
    with demo_db.sessions() as session:
        assert session.get(Reading, reading_id).temp_c == pytest.approx(55.5)
