"""A few posted rows read plainly (fleet.io.plain) give exactly what the table parser gives, and a post stored row by
row (fleet.services.posted_readings.store_plainly) stores what the importer stores.

The reference for the values is the project's own table parser (fleet.io.parse.parse_table with the rules of
fleet.io.rules), which the importer tests check against pint, zoneinfo and Python's float(); here every cell the
plain reader takes must come out of the table parser alike, without a problem.
"""

import math
from datetime import datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from sqlalchemy import func, select

from fleet.db.models import Pump, Reading
from fleet.io import rules
from fleet.io.parse import RowConventions, parse_table
from fleet.io.plain import plain_row
from fleet.services import posted_readings
from fleet.services.posted_readings import store_plainly, store_posted
from fleet.services.writes import perform
from fleet.timeutil import utcnow

NOW = datetime(2026, 6, 1, 12, 0)
BASE = {"pump": "P-1", "taken_at": "2026-05-30 08:00", "hours": "1200", "outlet_pressure": "150",
        "speed": "1450", "oil_temp": "48.5"}
# One cell changed at a time: plain ones, ones the table parser refuses, and ones only it may judge.
VARIANTS = [
    {}, {"hours": "0"}, {"hours": "-1"}, {"hours": "1e3"}, {"hours": "1_000"}, {"hours": "12,5"}, {"hours": " 7 "},
    {"hours": "nan"}, {"hours": "inf"}, {"hours": "1e999"}, {"hours": ""}, {"hours": "0x10"}, {"hours": "+.5"},
    {"hours": "1" * 30}, {"outlet_pressure": "0.99"}, {"outlet_pressure": "1"}, {"outlet_pressure [psi]": "2175"},
    {"outlet_pressure [kPa]": "15000"}, {"outlet_pressure [furlong]": "3"}, {"outlet_pressure [rpm]": "3"},
    {"speed": "9.9"}, {"speed [Hz]": "24"}, {"oil_temp": "150"}, {"oil_temp": "150.1"}, {"oil_temp [degF]": "120"},
    {"oil_temp": "-40"}, {"oil_temp": "-41"}, {"outlet_flow": "40"}, {"outlet_flow [gal/min]": "10.5"},
    {"outlet_flow": "-0.1"}, {"outlet_flow": ""}, {"case_drain_flow": "1.2"}, {"stroke": "50"}, {"stroke": "5"},
    {"stroke [%]": "100"}, {"stroke": "101"}, {"taken_at": "2026-05-30T08:00"}, {"taken_at": "2026-05-30"},
    {"taken_at": "2026-05-30 08:00:30.1234567"}, {"taken_at": "2026-05-30T08:00+02:00"},
    {"taken_at": "2026-05-30T08:00Z"}, {"taken_at": "2026-05-30T08:00-0530"}, {"taken_at": "2026-02-30 08:00"},
    {"taken_at": "2026-06-01 12:59"}, {"taken_at": "2026-06-01 13:01"}, {"taken_at": "1969-12-31 23:59"},
    {"taken_at": "1970-01-01 00:00"}, {"taken_at": "30/05/2026"}, {"taken_at": "now"}, {"taken_at": ""},
    {"taken_at": "2026-03-08 02:30"}, {"taken_at": "2025-11-02 01:30"}, {"taken_at": "2026-03-29 02:30"},
    {"taken_by": "A. Tech"}, {"taken_by": "x" * 120}, {"taken_by": "x" * 121}, {"note": "n\x00ul"},
    {"note": "bad \udc80"}, {"note": "long " * 500}, {"source": "API"}, {"source": "hand-held"},
    {"source": "form"}, {"hours": "\u0661\u0662\u0663"}, {"taken_at": "\u0662\u0660\u0662\u0666-05-30 08:00"},
    {"hours": "1e-400"}, {"speed": "1450."}, {"pump": ""}, {"pump": "  P-1  "}, {"unknown_column": "3"},
    {"pump": "\x00"},
]
ZONES = [None, "America/Chicago", "Europe/Berlin"]


def _same(plain, parsed) -> bool:
    if isinstance(plain, float) and math.isnan(plain):
        return parsed is None or (isinstance(parsed, float) and math.isnan(parsed))
    if plain is None:
        return parsed is None or parsed is pd.NaT or (isinstance(parsed, float) and math.isnan(parsed))
    return type(plain)(parsed) == plain if not isinstance(plain, pd.Timestamp) else pd.Timestamp(parsed) == plain


@pytest.mark.parametrize("zone", ZONES)
def test_every_cell_read_plainly_is_read_alike_by_the_table_parser(zone):
    taken = 0
    for change in VARIANTS:
        cells = {k: v for k, v in BASE.items() if not any(h.split(" [")[0] == k for h in change)}
        cells.update(change)
        values = plain_row("readings", cells, zone, NOW)
        table = pd.DataFrame([cells], dtype=str)
        parsed, problems = parse_table("readings", table, RowConventions(pd.Series([zone or "UTC"]),
                                                                          pd.Series([False])))
        problems += rules.table_rules("readings", parsed.data, NOW)
        if values is None:
            continue
        taken += 1
        assert problems == [], (change, problems)
        row = parsed.data.iloc[0]
        assert set(values) == set(parsed.data.columns), change
        for name, value in values.items():
            assert _same(value, row[name]), (change, name, value, row[name])
    assert taken >= 30  # the plain reader takes the everyday cells, not only the base row


def test_a_time_skipped_or_repeated_by_daylight_saving_is_left_to_the_table_parser():
    """America/Chicago skipped 02:00-03:00 on 2026-03-08 and repeated 01:00-02:00 on 2025-11-02 (IANA tz database,
    through zoneinfo); the table parser words both refusals."""
    for wall in ("2026-03-08 02:30", "2025-11-02 01:30"):
        assert plain_row("readings", {**BASE, "taken_at": wall}, "America/Chicago", NOW) is None
    summer = plain_row("readings", {**BASE, "taken_at": "2026-05-30 08:00"}, "America/Chicago", NOW)
    assert summer["taken_at"] == pd.Timestamp("2026-05-30 13:00")  # CDT is UTC-05:00 (IANA tz database)


def test_a_unit_in_the_header_is_converted_by_pint():
    """2175 psi = 149.96 bar (1 psi = 0.0689476 bar, NIST SP 811)."""
    values = plain_row("readings", {**{k: v for k, v in BASE.items() if k != "outlet_pressure"},
                                    "outlet_pressure [psi]": "2175"}, None, NOW)
    assert values["outlet_pressure"] == pytest.approx(2175 * 0.0689476, rel=1e-6)


def _post_rows(demo_db, serial: str, minutes_ago: int, hours_step: float) -> list[dict[str, str]]:
    with demo_db.sessions() as session:
        last = session.execute(select(func.max(Reading.taken_at), func.max(Reading.hours))
                               .join(Pump, Pump.id == Reading.pump_id).where(Pump.serial == serial)).one()
    at = max(last[0] + timedelta(minutes=1), utcnow() - timedelta(minutes=minutes_ago))
    return [{"pump": serial, "taken_at": f"{at:%Y-%m-%d %H:%M}", "hours": repr(last[1] + hours_step),
             "outlet_pressure": "151.5", "speed": "1450", "outlet_flow": "39.5", "case_drain_flow": "",
             "oil_temp": "49", "note": "invented check"}]


COMPARED = ("hours", "pressure_bar", "speed_rpm", "flow_lpm", "drain_lpm", "temp_c", "stroke", "taken_by", "note",
            "source", "client_id")


def _stored(demo_db, reading_id: int) -> dict:
    with demo_db.sessions() as session:
        reading = session.get(Reading, reading_id)
        return {name: getattr(reading, name) for name in COMPARED}


def test_a_post_stored_row_by_row_stores_what_the_importer_stores(demo_db, monkeypatch):
    plain_rows = _post_rows(demo_db, "EY-104", 30, -5.0)  # hours backwards: a doubt (fleet.io.meter)
    imported_rows = _post_rows(demo_db, "EY-105", 30, -5.0)
    plain = perform(demo_db.sessions, lambda s: store_posted(s, plain_rows, ["plain-1"], [None])).value
    monkeypatch.setattr(posted_readings, "store_plainly", lambda *args, **kwargs: None)
    imported = perform(demo_db.sessions, lambda s: store_posted(s, imported_rows, ["imported-1"], [None])).value
    assert plain.created == imported.created == 1
    assert [d["code"] for d in plain.doubts] == [d["code"] for d in imported.doubts] == ["hours_backwards"]
    assert plain.doubts[0]["row"] == imported.doubts[0]["row"] == 2
    one, other = _stored(demo_db, plain.readings[0]["id"]), _stored(demo_db, imported.readings[0]["id"])
    assert {**one, "client_id": None, "hours": None} == {**other, "client_id": None, "hours": None}
    assert (one["hours"], other["hours"]) == (float(plain_rows[0]["hours"]), float(imported_rows[0]["hours"]))
    assert (one["client_id"], other["client_id"]) == ("plain-1", "imported-1")
    assert plain.readings[0]["taken_at"] == plain_rows[0]["taken_at"].replace(" ", "T")


def test_a_post_the_plain_reader_declines_is_stored_by_the_importer_with_its_words(demo_db):
    rows = _post_rows(demo_db, "EY-104", 20, 3.0)
    with demo_db.sessions() as session:
        assert store_plainly(session, [{**rows[0], "hours": "12,5"}], [None], [None]) is None
        assert store_plainly(session, [{**rows[0], "pump": "NO-SUCH-PUMP"}], [None], [None]) is None
        assert session.scalar(select(func.count()).select_from(Reading).where(Reading.note == "invented check")) \
            == 0
    outcome = perform(demo_db.sessions, lambda s: store_posted(s, rows, [None], [None])).value
    with demo_db.sessions() as session:  # the same pump and time again: the importer's words
        assert store_plainly(session, rows, [None], [None]) is None
    assert outcome.created == 1 and np.isfinite(outcome.readings[0]["id"])


def test_a_posted_reading_is_not_counted_as_corrected_by_either_path(demo_db, monkeypatch):
    """Keeping a reading's client_id is part of storing it: no 'update' in the audit trail (fleet.db.queries)."""
    from fleet.db.queries import corrected_readings

    plain = perform(demo_db.sessions, lambda s: store_posted(s, _post_rows(demo_db, "EY-104", 40, 4.0),
                                                             ["audit-plain"], [None])).value
    monkeypatch.setattr(posted_readings, "store_plainly", lambda *args, **kwargs: None)
    imported = perform(demo_db.sessions, lambda s: store_posted(s, _post_rows(demo_db, "EY-105", 40, 4.0),
                                                                ["audit-imported"], [None])).value
    ids = [plain.readings[0]["id"], imported.readings[0]["id"]]
    with demo_db.sessions() as session:
        assert corrected_readings(session, ids) == set()
        assert [session.get(Reading, i).client_id for i in ids] == ["audit-plain", "audit-imported"]
