"""The pump page's own rows (fleet.services.pages.pump_rows): the whole-fleet loader's frames for that one pump,
local times as Python's zoneinfo writes them, and nothing kept between requests (a new reading shows at once)."""

import base64
import json
from datetime import UTC, timedelta
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
from pandas.testing import assert_frame_equal
from sqlalchemy import func, select

from fleet.db.models import Pump, Reading
from fleet.frames import PUMP_COLUMNS
from fleet.services.analysis.frames import load_frames
from fleet.services.pages.pump import local_minutes
from fleet.services.pages.pump_rows import pump_rows
from fleet.timeutil import utcnow

FIXED_PUMP = "EY-104"  # invented demo plant: an internal gear pump (fixed displacement, no case drain)


def _sorted(frame: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    return frame.sort_values(keys, kind="stable").reset_index(drop=True)


def test_the_pump_rows_are_the_fleet_loaders_frames_for_every_pump(demo_db):
    now = utcnow()
    with demo_db.sessions() as session:
        pumps = session.scalars(select(Pump).order_by(Pump.id)).all()
        assert len(pumps) > 30
        for pump in pumps:
            rows = pump_rows(session, pump, now)
            frames = load_frames(session, [pump.id], as_of=now)
            columns = list(PUMP_COLUMNS)
            assert_frame_equal(rows.pumps[columns].reset_index(drop=True), frames.pumps[columns],
                               check_dtype=False, obj=pump.serial)
            assert_frame_equal(rows.readings.reset_index(drop=True), frames.readings.reset_index(drop=True),
                               obj=pump.serial)
            assert_frame_equal(_sorted(rows.events, ["date", "kind"]), _sorted(frames.events, ["date", "kind"]),
                               obj=pump.serial)
            assert_frame_equal(_sorted(rows.flow_points, ["reading_id", "pressure_bar"]),
                               _sorted(frames.flow_points, ["reading_id", "pressure_bar"]), check_dtype=False,
                               obj=pump.serial)


def test_local_times_are_what_zoneinfo_writes_across_clock_changes():
    # Reference: Python's datetime.astimezone with zoneinfo (the IANA tz database) and isoformat. Zones with
    # half-hour and 45-minute offsets, a half-hour daylight-saving step (Lord Howe), and a date before standard
    # time whose offset has seconds (Amsterdam's local mean time, +00:19:32).
    zones = ("UTC", "Europe/Berlin", "America/Chicago", "America/St_Johns", "Asia/Kathmandu", "Australia/Lord_Howe",
             "Europe/Amsterdam")
    around_changes = [pd.Timestamp(day) + pd.Timedelta(minutes=15 * k)
                      for day in ("2026-03-08", "2026-03-29", "2026-04-05", "2026-10-04", "2026-10-25", "2026-11-01")
                      for k in range(-8, 200)]
    stamps = pd.DatetimeIndex([*around_changes, pd.Timestamp("1900-06-01 12:07:59"),
                               pd.Timestamp("2031-12-31 23:59:30")])
    for name in zones:
        expected = [t.to_pydatetime().replace(tzinfo=UTC).astimezone(ZoneInfo(name)).isoformat(timespec="minutes")
                    for t in stamps]
        assert local_minutes(stamps, name).tolist() == expected, name


def _efficiency_points(html: str) -> int:
    spec = html.split('data-for="chart-efficiency">', 1)[1].split("</script>", 1)[0]
    measured = json.loads(spec)["data"][0]["x"]
    return len(np.frombuffer(base64.b64decode(measured["bdata"]), dtype=measured["dtype"]))


def test_a_new_reading_is_on_the_page_and_its_chart_at_once(client, demo_db):
    before = client.get(f"/pumps/{FIXED_PUMP}.json").get_json()["readings"]
    assert _efficiency_points(client.get(f"/pumps/{FIXED_PUMP}").get_data(as_text=True)) == len(before)
    with demo_db.sessions() as session:
        last_hours = session.scalar(select(func.max(Reading.hours)).join(Pump, Pump.id == Reading.pump_id)
                                    .where(Pump.serial == FIXED_PUMP))
    body = {"pump": FIXED_PUMP, "taken_at": (utcnow() - timedelta(minutes=5)).isoformat(timespec="minutes"),
            "hours": last_hours + 8, "outlet_pressure": 150, "speed": 1450, "outlet_flow": 40.0, "oil_temp": 50}
    created = client.post("/api/readings", json=body)
    assert created.status_code == 201
    after = client.get(f"/pumps/{FIXED_PUMP}.json").get_json()["readings"]
    assert len(after) == len(before) + 1
    newest = after[-1]
    assert newest["reading_id"] == created.get_json()["readings"][0]["id"]
    assert newest["source"] == "api" and newest["hours"] == last_hours + 8 and newest["corrected"] is False
    assert _efficiency_points(client.get(f"/pumps/{FIXED_PUMP}").get_data(as_text=True)) == len(after)


def test_each_readings_oil_is_the_fleet_merge_asofs(demo_db):
    # Reference: the whole-fleet loader's attach_oil, which for many pumps places readings with pandas.merge_asof
    # (backward, by pump) and its first-stay fallback; the one-pump search (frames.oil_of_one) must give the same
    # oil to every reading, including pumps that moved between machines.
    from fleet.services.analysis.frames import load_readings

    with demo_db.sessions() as session:
        fleet = load_readings(session)
        assert fleet["pump_id"].nunique() > 30
        moved = 0
        for pump in session.scalars(select(Pump).order_by(Pump.id)).all():
            rows = pump_rows(session, pump, utcnow())
            expected = fleet[fleet["pump_id"] == pump.id].reset_index(drop=True)
            assert_frame_equal(rows.all_readings, expected, check_exact=True, obj=pump.serial)
            moved += len({stay.machine_id for stay in rows.stays}) > 1
        assert moved > 0  # a pump whose oil changes with its machine is among them


def test_maintenance_dates_in_any_form_the_driver_gives_read_as_the_fleet_loader_reads_them():
    # Reference: pandas' reading of the datetimes SQLAlchemy makes of them (what load_events frames), dtype included,
    # whether the driver gives SQLAlchemy's stored text, text without fractions, or datetimes (PostgreSQL).
    from datetime import datetime

    from fleet.frames import EVENT_COLUMNS
    from fleet.services.pages.pump_rows import _events

    times = [datetime(2024, 3, 1, 8, 30), datetime(2025, 11, 30, 23, 59, 1)]
    expected = pd.to_datetime(pd.Series(times, dtype=object))
    for given in ([t.strftime("%Y-%m-%d %H:%M:%S.%f") for t in times], [str(t) for t in times], times):
        got = {"pump_id": (1, 1), "date": tuple(given), "hours": (100.0, None), "kind": ("overhaul", "inspection"),
               "cost": (None, 5.0)}
        events = _events(got, list(EVENT_COLUMNS))
        pd.testing.assert_series_equal(events["date"], expected, check_names=False, obj=str(given))
