"""A file of readings imported again: the rows equal to stored readings are counted as already stored and not
written twice; a row at a stored pump and time with other values is refused, naming the value; the API still
refuses a repeat (its clients resend with their own ids, tests/test_api_readings.py).

References: the rows themselves, counted by hand and read back through the ORM; pint converts the file in other
units (an outside library), and `fleet export --units site` writes the file imported again (the project's own
round trip). SQLite, or PostgreSQL when FLEET_TEST_DATABASE_URL is set."""

import pint
import pytest
from click.testing import CliRunner
from sqlalchemy import select

from fleet.cli import main
from fleet.db.models import Reading
from fleet.io.parse import ImportRejected
from fleet.services.transfer import reading_blocks
from fleet.services.transfer.importing import import_file
from fleet.services.transfer.uploads import upload_file
from tests.conftest import readings_stored

COLUMNS = ["pump", "taken_at", "hours", "outlet_pressure", "speed", "outlet_flow", "oil_temp", "note"]


def _row(pump: str, day: int, hours: float, pressure: str = "230", note: str = "") -> list[str]:
    return [pump, f"2025-03-{day:02d} 08:00", f"{hours:g}", pressure, "1490", "63.1", "48", note]


ROUND = [_row("T-101", d, 100 + 10 * d, note="after the filter change" if d == 2 else "") for d in range(1, 6)] + [
    _row("T-102", 3, 400)]


def _write(path, rows, columns=COLUMNS):
    path.write_text(",".join(columns) + "\n" + "".join(",".join(row) + "\n" for row in rows), encoding="utf-8")
    return path


def _import(db, path):
    with db.sessions.begin() as session:
        return import_file(session, "readings", path)


@pytest.mark.parametrize("block_rows", [65_536, 2])  # one block, and blocks of two rows (under a savepoint)
def test_a_file_imported_again_stores_nothing_twice_and_says_so(small_register, tmp_path, monkeypatch, block_rows):
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", block_rows)
    path = _write(tmp_path / "round.csv", ROUND)
    first = _import(small_register, path)
    assert (first.created, first.skipped) == (6, 0)
    again = _import(small_register, path)
    assert (again.created, again.skipped, again.rows) == (0, 6, 6)
    assert again.pump_ids == set()  # nothing changed: no pump to analyse again
    assert "0 new, 0 updated, 6 already stored" in again.summary()
    assert readings_stored(small_register) == 6


@pytest.mark.parametrize("block_rows", [65_536, 2])
def test_a_file_with_rows_added_stores_only_the_new_rows(small_register, tmp_path, monkeypatch, block_rows):
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", block_rows)
    _import(small_register, _write(tmp_path / "round.csv", ROUND))
    longer = ROUND + [_row("T-101", 8, 180), _row("T-102", 9, 460)]
    result = _import(small_register, _write(tmp_path / "longer.csv", longer))
    assert (result.created, result.skipped) == (2, 6)
    with small_register.sessions() as session:
        days = sorted(t.day for t in session.scalars(select(Reading.taken_at)))
    assert days == [1, 2, 3, 3, 4, 5, 8, 9]  # every reading once


def test_a_row_with_other_values_at_a_stored_time_is_refused_naming_the_value(small_register, tmp_path):
    _import(small_register, _write(tmp_path / "round.csv", ROUND))
    changed = [*ROUND[:2], _row("T-101", 3, 130, pressure="231"), *ROUND[3:], _row("T-101", 8, 180)]
    with pytest.raises(ImportRejected) as info:
        _import(small_register, _write(tmp_path / "changed.csv", changed))
    problems = [str(p) for p in info.value.problems]
    assert problems == ["row 4, column 'taken_at': a reading of pump 'T-101' at 2025-03-03 08:00 is already stored, "
                        "with other values (outlet_pressure: 231 bar here, 230 bar stored); a stored reading is "
                        "changed on its page, with a reason"]
    assert readings_stored(small_register) == 6  # the new row of day 8 was not kept either: whole or nothing


def test_a_changed_note_is_another_value_and_a_missing_note_column_is_not(small_register, tmp_path):
    _import(small_register, _write(tmp_path / "round.csv", ROUND))
    renoted = [_row("T-101", 2, 120, note="filter changed")]
    with pytest.raises(ImportRejected) as info:
        _import(small_register, _write(tmp_path / "renoted.csv", renoted))
    assert "(note: 'filter changed' here, 'after the filter change' stored)" in info.value.report()
    without_notes = [row[:-1] for row in ROUND]  # a file without the note column says nothing of the notes
    result = _import(small_register, _write(tmp_path / "plain.csv", without_notes, COLUMNS[:-1]))
    assert (result.created, result.skipped) == (0, 6)


def test_the_same_readings_in_other_units_are_the_same_readings(small_register, tmp_path):
    _import(small_register, _write(tmp_path / "round.csv", ROUND))
    # pint, an outside reference, writes the pressures in psi with every digit a double holds.
    psi = pint.UnitRegistry().Quantity(230.0, "bar").to("psi").magnitude
    columns = [*COLUMNS[:3], "outlet_pressure [psi]", *COLUMNS[4:]]
    rows = [[*row[:3], repr(psi), *row[4:]] for row in ROUND]
    result = _import(small_register, _write(tmp_path / "psi.csv", rows, columns))
    assert (result.created, result.skipped) == (0, 6)


def test_an_export_in_site_units_imported_back_is_already_stored(small_register, cli_env, tmp_path):
    _import(small_register, _write(tmp_path / "round.csv", ROUND))
    runner = CliRunner()
    out = tmp_path / "export.csv"
    done = runner.invoke(main, ["export", "readings", str(out), "--units", "site"])
    assert done.exit_code == 0, done.output
    back = runner.invoke(main, ["import", "readings", str(out), "--no-analysis"])
    assert back.exit_code == 0, back.output
    assert "0 new, 0 updated, 6 already stored" in back.output
    assert readings_stored(small_register) == 6


def test_the_upload_page_counts_the_rows_already_stored(small_register, tmp_path):
    path = _write(tmp_path / "round.csv", ROUND)
    first = upload_file(small_register.sessions, "readings", path.read_bytes(), "round.csv")
    assert first["ok"] and first["created"] == 6
    again = upload_file(small_register.sessions, "readings", path.read_bytes(), "round.csv")
    assert again["ok"] and (again["created"], again["skipped"]) == (0, 6)
    assert "6 already stored" in again["summary"]
    assert readings_stored(small_register) == 6


def test_a_reading_repeated_within_the_file_is_still_a_repeat(small_register, tmp_path):
    _import(small_register, _write(tmp_path / "round.csv", ROUND))
    with pytest.raises(ImportRejected) as info:
        _import(small_register, _write(tmp_path / "twice.csv", [ROUND[0], _row("T-101", 9, 190), ROUND[0]]))
    assert [str(p) for p in info.value.problems] == [
        "row 4, column 'taken_at': the same pump and time appears earlier in the file"]
    assert readings_stored(small_register) == 6


def test_new_and_already_stored_add_up_to_the_rows(small_register, tmp_path):
    _import(small_register, _write(tmp_path / "round.csv", ROUND))
    result = _import(small_register, _write(tmp_path / "more.csv", [_row("T-103", 1, 10), *ROUND]))
    assert (result.created, result.skipped, result.rows) == (1, 6, 7)
