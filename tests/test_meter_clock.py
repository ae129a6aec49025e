"""An hour meter running faster than the clock gets the same "look again" question as one running backwards,
through every door: the rounds form, the readings API's answer and a CSV import."""

import io
from datetime import datetime, timedelta

from sqlalchemy import func, select

from fleet.db.models import Pump, Reading
from fleet.io.meter import meter_doubt, most_hours_possible
from fleet.timeutil import utcnow

SERIAL = "EY-104"  # invented demo plant pump (internal gear, no case drain)
T0 = datetime(2026, 1, 5, 6, 0)


def test_the_allowance_is_clock_hours_plus_one_hour_plus_two_percent():
    # Elapsed clock time is plain arithmetic; the allowance (1 h + 2 %) is common practice, no source.
    at = T0 + timedelta(hours=25.5)
    assert most_hours_possible(T0, 1000.0, at) == 1000.0 + 25.5 * 1.02 + 1.0  # 1027.01 h
    assert meter_doubt(T0, 1000.0, at, 1027.0) is None
    assert meter_doubt(T0, 1000.0, at, 1000.0) is None  # a pump that stood still
    # The case the issue reports: 83 h on the meter in 25.5 h of clock time.
    doubt = meter_doubt(T0, 1000.0, at, 1083.0)
    assert doubt.code == "hours_faster_than_clock"
    assert "83 h in 25.5 h of clock time" in doubt.message and "look again" in doubt.message
    # The one rule also keeps the backwards question.
    assert meter_doubt(T0, 1000.0, at, 999.0).code == "hours_backwards"
    assert meter_doubt(None, None, at, 5.0) is None  # a first reading has nothing to compare with


def _last(demo_db, serial=SERIAL):
    with demo_db.sessions() as session:
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == serial))
        return session.execute(select(Reading.taken_at, Reading.hours).where(Reading.pump_id == pump_id)
                               .order_by(Reading.taken_at.desc()).limit(1)).one()


def _count(demo_db) -> int:
    with demo_db.sessions() as session:
        return session.scalar(select(func.count()).select_from(Reading))


def _too_fast(last_at, last_hours, at) -> float:
    return round(most_hours_possible(last_at, last_hours, at) + 5.0, 1)


def test_the_form_asks_before_saving_and_saves_when_confirmed(client, demo_db):
    route = client.post("/rounds", data={"name": "Meter walk", "pumps": SERIAL}).headers["Location"]
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == SERIAL))
        p_rated, n_rated, vg = pump.rated_pressure_bar, pump.rated_speed_rpm, pump.displacement_cc
    last_at, last_hours = _last(demo_db)
    at = utcnow().replace(second=0, microsecond=0) - timedelta(minutes=5)
    form = {"taken_at": at.strftime("%Y-%m-%dT%H:%M"), "hours": f"{_too_fast(last_at, last_hours, at):.1f}",
            "outlet_pressure": f"{0.8 * p_rated:.1f}", "outlet_pressure_unit": "bar", "speed": f"{n_rated:.0f}",
            "speed_unit": "rpm", "outlet_flow": f"{0.9 * vg * n_rated / 1000:.2f}", "outlet_flow_unit": "L/min",
            "oil_temp": "50", "oil_temp_unit": "degC"}
    before = _count(demo_db)
    asked = client.post(f"{route}/stops/1", data=form)
    html = asked.get_data(as_text=True)
    assert asked.status_code == 200 and "Please look again before saving." in html
    assert "of clock time since the last reading" in html
    assert 'name="confirmed" value="hours_faster_than_clock"' in html
    assert _count(demo_db) == before
    saved = client.post(f"{route}/stops/1", data={**form, "action": "confirm", "confirmed": "hours_faster_than_clock"})
    assert saved.status_code == 302 and _count(demo_db) == before + 1


def test_the_api_stores_and_names_the_doubt_in_its_answer(client, demo_db):
    last_at, last_hours = _last(demo_db)
    at = utcnow().replace(second=0, microsecond=0) - timedelta(minutes=10)
    ok = {"pump": "EY-105", "taken_at": at.isoformat(), "hours": _last(demo_db, "EY-105")[1] + 1,
          "outlet_pressure": 100, "speed": 1450, "outlet_flow": 30.0, "oil_temp": 50}
    fast = {**ok, "pump": SERIAL, "hours": _too_fast(last_at, last_hours, at)}
    response = client.post("/api/readings", json=[ok, fast])
    assert response.status_code == 201
    doubts = response.get_json()["doubts"]
    assert [(d["row"], d["field"], d["code"]) for d in doubts] == [(2, "hours", "hours_faster_than_clock")]
    backwards = {**fast, "taken_at": (at + timedelta(minutes=5)).isoformat(), "hours": last_hours - 50}
    answer = client.post("/api/readings", json=backwards).get_json()
    assert [(d["row"], d["code"]) for d in answer["doubts"]] == [(1, "hours_backwards")]


def test_a_csv_import_compares_rows_of_the_same_file_too(client, demo_db):
    last_at, last_hours = _last(demo_db)
    first = last_at.replace(second=0, microsecond=0) + timedelta(hours=1)
    second = first + timedelta(hours=10)
    text = ("pump,taken_at,hours,outlet_pressure,speed,outlet_flow,oil_temp\n"
            f"{SERIAL},{first:%Y-%m-%d %H:%M},{last_hours + 1:.1f},150,1450,40,50\n"
            f"{SERIAL},{second:%Y-%m-%d %H:%M},{last_hours + 1 + 40:.1f},150,1450,40,50\n")
    before = _count(demo_db)
    response = client.post("/register/upload.json", data={"kind": "readings",
                                                          "file": (io.BytesIO(text.encode()), "meter.csv")},
                           content_type="multipart/form-data")
    assert response.status_code == 200 and _count(demo_db) == before + 2  # stored: a doubt is no refusal
    doubts = response.get_json()["outcome"]["doubts"]
    # Row 3 (the header is row 1): 40 h on the meter in 10 h of clock time, against row 2 of the same file.
    assert [(d["row"], d["code"]) for d in doubts] == [(3, "hours_faster_than_clock")]
    assert "40 h in 10.0 h of clock time" in doubts[0]["message"]
    html = client.post("/register/upload", data={"kind": "readings", "file": (io.BytesIO(b""), "x.csv")},
                       content_type="multipart/form-data").get_data(as_text=True)
    assert "look again" not in html


def test_the_cli_import_prints_the_doubt(demo_db, tmp_path):
    from click.testing import CliRunner

    from fleet.cli import main
    last_at, last_hours = _last(demo_db)
    at = last_at.replace(second=0, microsecond=0) + timedelta(hours=2)
    file = tmp_path / "meter.csv"
    file.write_text("pump,taken_at,hours,outlet_pressure,speed,outlet_flow,oil_temp\n"
                    f"{SERIAL},{at:%Y-%m-%d %H:%M},{last_hours + 30:.1f},150,1450,40,50\n")
    result = CliRunner().invoke(main, ["--database", demo_db.url, "import", "readings", str(file), "--no-analysis"])
    assert result.exit_code == 0, result.output
    assert "row 2, column 'hours': stored; look again: Running hours advanced 30 h in 2.0 h" in result.output
