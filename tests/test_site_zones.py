"""Each site's time zone and decimal mark: times without an offset read in the row's site zone, daylight-saving
gaps and folds refused with the offsets that settle them, exports in local time with the offset, a decimal comma
only where the site allows it. The invented demo plant's sites are given conventions here, through the importer."""

import csv
import io
from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo

import pandas as pd
import pytest
from click.testing import CliRunner
from sqlalchemy import func, select

from fleet.cli import main
from fleet.db.models import Installation, Pump, Reading, Site
from fleet.io.localtime import iso_local, localize, zone_name
from fleet.io.parse import ImportRejected, parse_table
from fleet.services.sitelocal import row_conventions
from fleet.services.transfer.exporting import export_table
from fleet.services.transfer.importing import import_table
from fleet.services.writes import perform

PUMP = "EY-104"  # invented demo pump at the invented site East Yard
SITE = "East Yard"


def _cells(rows: list[dict]) -> pd.DataFrame:
    return pd.DataFrame(rows, dtype=str).fillna("")


def _set_site(demo_db, **conventions) -> None:
    row = {"site": SITE, **{k: str(v) for k, v in conventions.items()}}
    perform(demo_db.sessions, lambda s: import_table(s, "sites", _cells([row])))


def _reading(taken_at: str, hours: str, **more) -> dict:
    return {"pump": PUMP, "taken_at": taken_at, "hours": hours, "outlet_pressure [bar]": "150",
            "speed [rpm]": "1500", "oil_temp [degC]": "50", **more}


def _last_hours(demo_db) -> float:
    with demo_db.sessions() as session:
        return session.scalar(select(func.max(Reading.hours)).join(Pump).where(Pump.serial == PUMP))


def _stored_at(demo_db, hours: float) -> datetime:
    with demo_db.sessions() as session:
        return session.scalar(select(Reading.taken_at).join(Pump).where(Pump.serial == PUMP,
                                                                       Reading.hours == hours))


def _count(demo_db) -> int:
    with demo_db.sessions() as session:
        return session.scalar(select(func.count()).select_from(Reading))


# --- the zone arithmetic against Python's zoneinfo (the IANA tz database) ---------------------------------------

@pytest.mark.parametrize("zone", ["America/Chicago", "Europe/Berlin", "Australia/Sydney", "Asia/Kolkata"])
def test_wall_times_around_every_2026_change_match_zoneinfo(zone):
    # Reference: Python's zoneinfo, reading the IANA data. A wall time is a gap when it does not survive the round
    # trip through UTC, a fold when its two readings (fold=0, fold=1) differ; otherwise both give its one moment.
    tz = ZoneInfo(zone)
    walls = pd.Series(pd.date_range("2026-01-01", "2026-12-31 23:45", freq="15min"))
    # Keep the days around each change (and a few plain days) so the check stays quick.
    offsets = [datetime(2026, 1, 1, tzinfo=tz).utcoffset()]
    days = set()
    for day in pd.date_range("2026-01-01", "2026-12-31"):
        offset = day.to_pydatetime().replace(hour=12, tzinfo=tz).utcoffset()
        if offset != offsets[-1]:
            days.update({day - pd.Timedelta(days=1), day})
            offsets.append(offset)
    days.update(pd.to_datetime(["2026-01-15", "2026-07-15"]))
    walls = walls[walls.dt.normalize().isin(days)].reset_index(drop=True)
    got, reasons = localize(walls, pd.Series(zone, index=walls.index))
    gaps = folds = 0
    for position, wall in enumerate(walls):
        naive = wall.to_pydatetime()
        first, second = naive.replace(tzinfo=tz, fold=0), naive.replace(tzinfo=tz, fold=1)
        round_trip = first.astimezone(UTC).astimezone(tz).replace(tzinfo=None)
        if round_trip != naive:
            gaps += 1
            assert "does not exist" in reasons[position] and pd.isna(got[position])
        elif first.utcoffset() != second.utcoffset():
            folds += 1
            assert "happens twice" in reasons[position] and pd.isna(got[position])
        else:
            assert position not in reasons
            assert got[position] == pd.Timestamp(first.astimezone(UTC).replace(tzinfo=None))
    expected = 0 if zone == "Asia/Kolkata" else 4  # one hour of 15-minute steps skipped and one repeated a year
    assert (gaps, folds) == (expected, expected)


def test_zone_names_are_iana_names():
    assert zone_name("America/Chicago") == "America/Chicago"
    assert zone_name("") == "UTC"
    for bad in ("Mars/Olympus", "CST6", "../etc/passwd", "Chicago"):
        with pytest.raises(ValueError, match="not an IANA time zone"):
            zone_name(bad)


def test_iso_local_writes_the_offset_of_that_day():
    # America/Chicago: CST (UTC-6) in January, CDT (UTC-5) in July (IANA data, through zoneinfo).
    assert iso_local(datetime(2026, 1, 15, 14, 0), "America/Chicago") == "2026-01-15T08:00:00-06:00"
    assert iso_local(datetime(2026, 7, 15, 13, 0), "America/Chicago") == "2026-07-15T08:00:00-05:00"


# --- the importer ------------------------------------------------------------------------------------------

def test_sites_file_sets_a_zone_and_refuses_a_bad_one_naming_row_and_field(demo_db):
    _set_site(demo_db, time_zone="America/Chicago")
    with demo_db.sessions() as session:
        assert session.scalar(select(Site.time_zone).where(Site.name == SITE)) == "America/Chicago"
    bad = _cells([{"site": "River Shop", "time_zone": "Europe/Berlin"},
                  {"site": SITE, "time_zone": "Central Time", "pressure_unit": "furlong"}])
    with pytest.raises(ImportRejected) as caught:
        perform(demo_db.sessions, lambda s: import_table(s, "sites", bad))
    text = caught.value.report()
    assert "row 3, column 'time_zone': 'Central Time' is not an IANA time zone name" in text
    assert "row 3, column 'pressure_unit'" in text
    with demo_db.sessions() as session:  # nothing of the file was written, not even the good row
        assert session.scalar(select(Site.time_zone).where(Site.name == "River Shop")) == "UTC"


def test_times_without_offset_are_read_in_the_pumps_site_zone(demo_db):
    _set_site(demo_db, time_zone="America/Chicago")
    base = _last_hours(demo_db)
    import_rows = [_reading("2026-01-15 08:00", f"{base + 1}"),  # CST: 14:00 UTC
                   _reading("2026-07-15 08:00", f"{base + 2}"),  # CDT: 13:00 UTC
                   _reading("2026-07-16T08:00:00+02:00", f"{base + 3}")]  # an offset wins over the zone
    now = datetime(2026, 12, 1)
    perform(demo_db.sessions, lambda s: import_table(s, "readings", _cells(import_rows), now=now))
    assert _stored_at(demo_db, base + 1) == datetime(2026, 1, 15, 14, 0)
    assert _stored_at(demo_db, base + 2) == datetime(2026, 7, 15, 13, 0)
    assert _stored_at(demo_db, base + 3) == datetime(2026, 7, 16, 6, 0)


def test_a_skipped_or_repeated_local_time_is_refused_naming_row_field_and_reason(demo_db):
    _set_site(demo_db, time_zone="America/Chicago")
    base, before = _last_hours(demo_db), _count(demo_db)
    # 2026 in America/Chicago: clocks jump 02:00 -> 03:00 on 8 March and 02:00 -> 01:00 on 1 November (IANA data).
    rows = _cells([_reading("2026-03-08 02:30", f"{base + 1}"), _reading("2026-11-01 01:30", f"{base + 2}"),
                   _reading("2026-11-01T01:30-06:00", f"{base + 3}")])
    with pytest.raises(ImportRejected) as caught:
        perform(demo_db.sessions, lambda s: import_table(s, "readings", rows, now=datetime(2026, 12, 1)))
    text = caught.value.report()
    assert ("row 2, column 'taken_at': 2026-03-08 02:30 does not exist in America/Chicago: the clocks skip that "
            "hour") in text
    assert ("row 3, column 'taken_at': 2026-11-01 01:30 happens twice in America/Chicago: the clocks go back over "
            "that hour when daylight saving time ends; write it with its offset, -05:00 for the first or -06:00 for "
            "the second") in text
    assert "row 4" not in text  # the same repeated hour with its offset is one moment
    assert _count(demo_db) == before


def test_export_writes_local_time_with_its_offset_and_reads_back_the_same(demo_db):
    _set_site(demo_db, time_zone="America/Chicago")
    base = _last_hours(demo_db)
    perform(demo_db.sessions, lambda s: import_table(s, "readings", _cells([_reading("2026-01-15 08:00",
                                                                                      f"{base + 1}")]),
                                                     now=datetime(2026, 12, 1)))
    with demo_db.sessions() as session:
        table = export_table(session, "readings")
        pumps = export_table(session, "pumps")
    mine = table[(table["pump"] == PUMP) & (table["hours [h]"] == base + 1)]
    assert mine["taken_at"].tolist() == ["2026-01-15T08:00:00-06:00"]
    river = set(pumps[pumps["site"] == "River Shop"]["pump"])
    assert river and table[table["pump"].isin(river)]["taken_at"].str.endswith("+00:00").all()  # still UTC
    # The file reads back into the very moments stored.
    text = table[table["pump"] == PUMP].to_csv(index=False)
    again = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False)
    with demo_db.sessions() as session:
        parsed, problems = parse_table("readings", again, row_conventions(session, "readings", again))
        stored = session.scalars(select(Reading.taken_at).join(Pump).where(Pump.serial == PUMP)
                                 .order_by(Reading.taken_at)).all()
    assert problems == []
    assert [t.to_pydatetime() for t in parsed.data["taken_at"]] == list(stored)


def test_cli_export_prints_the_offset(demo_db, monkeypatch):
    _set_site(demo_db, time_zone="Europe/Berlin")
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    result = CliRunner().invoke(main, ["export", "readings", "-"])
    assert result.exit_code == 0, result.output
    rows = [r for r in csv.DictReader(io.StringIO(result.output)) if r["pump"] == PUMP]
    # Europe/Berlin is UTC+1 in winter and UTC+2 in summer (IANA data).
    assert {r["taken_at"][-6:] for r in rows} <= {"+01:00", "+02:00"}
    with demo_db.sessions() as session:
        first = session.scalar(select(func.min(Reading.taken_at)).join(Pump).where(Pump.serial == PUMP))
    assert rows[0]["taken_at"] == first.replace(tzinfo=UTC).astimezone(ZoneInfo("Europe/Berlin")).isoformat()


# --- decimal comma --------------------------------------------------------------------------------------------

def test_a_decimal_comma_is_read_only_where_the_site_allows_it(demo_db):
    base, before = _last_hours(demo_db), _count(demo_db)
    whole = int(base) + 1
    comma = _cells([_reading("2026-01-15 08:00", f"{whole},5", **{"oil_temp [degC]": "48,5"})])
    with pytest.raises(ImportRejected) as caught:
        perform(demo_db.sessions, lambda s: import_table(s, "readings", comma, now=datetime(2026, 12, 1)))
    assert "row 2, column 'hours': '" in caught.value.report()
    assert "this site writes decimals with a point" in caught.value.report()
    assert _count(demo_db) == before
    _set_site(demo_db, decimal_comma="yes")
    perform(demo_db.sessions, lambda s: import_table(s, "readings", comma, now=datetime(2026, 12, 1)))
    with demo_db.sessions() as session:
        stored = session.scalar(select(Reading).join(Pump).where(Pump.serial == PUMP, Reading.hours == whole + 0.5))
        assert stored.temp_c == pytest.approx(48.5)


def test_a_site_row_that_sets_the_decimal_comma_writes_its_own_numbers_with_it(demo_db):
    """A new site's row in sites.csv that says decimal_comma yes has its own tariff read with a comma (the file is
    written by a person who writes all numbers so); a row that turns it off is read with a point."""
    new = {"site": "Werk Nord (invented)", "currency": "EUR", "tariff_per_kwh": "0,21", "decimal_comma": "yes"}
    perform(demo_db.sessions, lambda s: import_table(s, "sites", _cells([new])))
    _set_site(demo_db, decimal_comma="yes", tariff_per_kwh="0,18")
    with demo_db.sessions() as session:
        stored = dict(session.execute(select(Site.name, Site.tariff_per_kwh)
                                      .where(Site.name.in_([SITE, "Werk Nord (invented)"]))).all())
    assert stored == {"Werk Nord (invented)": pytest.approx(0.21), SITE: pytest.approx(0.18)}
    _set_site(demo_db, decimal_comma="no", tariff_per_kwh="0.2")  # off again: a point, in the same row
    with pytest.raises(ImportRejected) as caught:  # a row without the column keeps the stored setting (off)
        perform(demo_db.sessions, lambda s: import_table(s, "sites", _cells([{"site": SITE, "tariff_per_kwh": "0,3"}])))
    assert "row 2, column 'tariff_per_kwh': '0,3' is not a number" in caught.value.report()


@pytest.mark.parametrize(("cell", "words"), [
    ("12,500", "could be a decimal or a thousands separator"),  # 12.5 or 12500?
    ("1.234,5", "write one decimal comma and no thousands separators"),
    ("1,2,3", "write one decimal comma and no thousands separators"),
])
def test_a_comma_that_could_be_a_thousands_separator_is_refused(demo_db, cell, words):
    _set_site(demo_db, decimal_comma="yes")
    before = _count(demo_db)
    rows = _cells([_reading("2026-01-15 08:00", "100", **{"outlet_pressure [bar]": cell})])
    with pytest.raises(ImportRejected) as caught:
        perform(demo_db.sessions, lambda s: import_table(s, "readings", rows, now=datetime(2026, 12, 1)))
    assert f"row 2, column 'outlet_pressure': '{cell}'" in caught.value.report()
    assert words in caught.value.report()
    assert _count(demo_db) == before


# --- the rounds form --------------------------------------------------------------------------------------------

def _route(client) -> str:
    response = client.post("/rounds", data={"name": "Zone walk", "pumps": PUMP})
    assert response.status_code == 302
    return response.headers["Location"]


def test_rounds_form_names_the_site_zone_and_reads_the_time_in_it(client, demo_db):
    _set_site(demo_db, time_zone="America/Chicago", decimal_comma="yes")
    location = _route(client)
    html = client.get(location).get_data(as_text=True)
    assert "Time (UTC)" not in html
    assert "Local time <small>(America/Chicago, UTC−0" in html
    assert 'data-decimal-comma="true"' in html
    now_local = datetime.now(ZoneInfo("America/Chicago"))
    assert f'value="{now_local:%Y-%m-%dT%H}:' in html  # the default time is the site's clock
    base = _last_hours(demo_db)
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == PUMP))
        flow = f"{0.9 * pump.displacement_cc * pump.rated_speed_rpm / 1000:.1f}".replace(".", ",")
        pressure = f"{0.8 * pump.rated_pressure_bar:.1f}".replace(".", ",")
        speed = f"{pump.rated_speed_rpm:.0f}"
    typed = (now_local - timedelta(minutes=30)).replace(second=0, microsecond=0)
    whole = int(base) + 6
    form = {"taken_at": f"{typed:%Y-%m-%dT%H:%M}", "hours": f"{whole},5", "outlet_pressure": pressure,
            "outlet_pressure_unit": "bar", "speed": speed, "speed_unit": "rpm", "outlet_flow": flow,
            "outlet_flow_unit": "L/min", "oil_temp": "50,5", "oil_temp_unit": "degC", "action": "confirm",
            "confirmed": "flow_above_theoretical,pressure_above_rated,temperature_outside_limits,hours_backwards"}
    response = client.post(f"{location}/stops/1", data=form)
    assert response.status_code == 302, response.get_data(as_text=True)
    stored = _stored_at(demo_db, whole + 0.5)
    assert stored == typed.astimezone(UTC).replace(tzinfo=None)


def test_rounds_form_without_comma_says_so_and_keeps_the_values(client, demo_db):
    location = _route(client)
    html = client.get(location).get_data(as_text=True)
    assert 'data-decimal-comma="false"' in html and "Local time <small>(UTC, UTC+00:00 now)" in html
    response = client.post(f"{location}/stops/1", data={"taken_at": "2026-01-15T08:00", "hours": "100,5",
                                                        "outlet_pressure": "150", "speed": "1500", "oil_temp": "50"})
    page = response.get_data(as_text=True)
    assert response.status_code == 422
    assert "this site writes decimals with a point" in page and 'value="100,5"' in page


def test_a_register_form_reads_its_time_in_the_pumps_site_zone(client, demo_db):
    _set_site(demo_db, time_zone="Asia/Kolkata")  # UTC+05:30 all year (IANA data; no daylight saving)
    local = (datetime.now(ZoneInfo("Asia/Kolkata")) - timedelta(hours=2)).replace(second=0, microsecond=0)
    response = client.post("/register/removal/new", data={"pump": PUMP, "removed_at": f"{local:%Y-%m-%dT%H:%M}"})
    assert response.status_code == 302, response.get_data(as_text=True)
    with demo_db.sessions() as session:
        removed = session.scalar(select(func.max(Installation.removed_at)).join(Pump).where(Pump.serial == PUMP))
    assert removed == local.astimezone(UTC).replace(tzinfo=None)
