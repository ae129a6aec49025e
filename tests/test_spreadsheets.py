"""Spreadsheets in and out (.xlsx), and no live formulas in any export (CSV or xlsx, command line or page twin).

The formula characters are those OWASP's guidance on CSV injection lists (=, +, -, @, tab, carriage return); a
guarded cell must reach openpyxl (the reference reader here) as a string, never as a formula (data_type 'f').
"""

import csv
import io
import math
import zipfile
from datetime import datetime

import openpyxl
import pandas as pd
import pytest
from click.testing import CliRunner
from sqlalchemy import func, select, update

from fleet.cli import main
from fleet.db.models import MaintenanceEvent, Pump, Reading
from fleet.io.columns import LOAD_ORDER
from fleet.io.formulas import guard, unguard
from fleet.io.parse import ImportRejected
from fleet.io.spreadsheet import XLSX_MIMETYPE, read_xlsx
from fleet.services.transfer.exporting import export_csv, export_xlsx
from fleet.services.transfer.importing import import_file, import_table
from tests.conftest import DATA
from tests.test_import_export import _load_everything

HOSTILE = ["=1+1", "@SUM(A1)", "+cmd", "-2+3"]


def _workbook(path, rows):
    book = openpyxl.Workbook()
    for row in rows:
        book.active.append(row)
    book.save(path)


def _hostile_pumps(db):
    """The small register plus pumps whose serials and notes are formula-like text, one with a negative limit."""
    table = pd.read_csv(DATA / "pumps_small.csv", dtype=str, keep_default_na=False)
    extra = pd.concat([table.iloc[[2]]] * len(HOSTILE), ignore_index=True)
    extra["pump"] = HOSTILE
    extra["note"] = HOSTILE
    extra["position"] = [f"spare {i}" for i in range(len(HOSTILE))]
    table = pd.concat([table, extra], ignore_index=True)
    table["oil_temp_min [degC]"] = ["-3.5"] + [""] * (len(table) - 1)
    with db.sessions.begin() as session:
        import_table(session, "pumps", table)


# --- the guard itself ----------------------------------------------------------------------------------------

def test_guard_neutralises_formula_text_and_round_trips():
    for text in HOSTILE + ["\t=2", "\r=1", "-", "'=x", "''@y"]:
        assert guard(text).startswith("'") and unguard(guard(text)) == text
    # Plain text, numbers and text that is only a number are left alone.
    for value in ["pump 7", "-3.5", "-12", "1e-3", -3.5, 0, None, "'quoted"]:
        assert guard(value) == value and unguard(guard(value)) == value


# --- CSV and xlsx exports ------------------------------------------------------------------------------------

def test_exports_neutralise_formulas_and_keep_negative_numbers(db):
    _hostile_pumps(db)
    with db.sessions() as session:
        text, rows = export_csv(session, "pumps")
        content, _ = export_xlsx(session, "pumps")
    assert rows == 3 + len(HOSTILE)
    records = list(csv.DictReader(io.StringIO(text)))
    serials = [r["pump"] for r in records]
    for hostile in HOSTILE:
        assert "'" + hostile in serials and hostile not in serials
    assert [r["oil_temp_min [degC]"] for r in records if r["pump"] == "T-101"] == ["-3.5"]

    sheet = openpyxl.load_workbook(io.BytesIO(content)).active
    headers = [c.value for c in sheet[1]]
    assert headers == list(records[0])  # the CSV's columns, units in the headers
    pump_col, note_col = headers.index("pump") + 1, headers.index("note") + 1
    low_col = headers.index("oil_temp_min [degC]") + 1
    cells = {sheet.cell(r, pump_col).value: r for r in range(2, sheet.max_row + 1)}
    for hostile in HOSTILE:
        row = cells["'" + hostile]
        for column in (pump_col, note_col):
            cell = sheet.cell(row, column)
            assert cell.data_type == "s" and cell.value == "'" + hostile
    negative = sheet.cell(cells["T-101"], low_col)
    assert negative.data_type == "n" and negative.value == -3.5
    assert sheet.cell(cells["T-101"], headers.index("displacement [cm3/rev]") + 1).value == 45


def test_cli_export_writes_a_real_workbook_and_guarded_csv(db, cli_env, tmp_path):
    _hostile_pumps(db)
    _load_everything_after_pumps(db)
    runner = CliRunner()
    target = tmp_path / "x.xlsx"
    result = runner.invoke(main, ["export", "readings", str(target)])
    assert result.exit_code == 0, result.output
    assert zipfile.is_zipfile(target) and "xl/workbook.xml" in zipfile.ZipFile(target).namelist()
    sheet = openpyxl.load_workbook(target).active
    assert sheet["A1"].value == "pump" and sheet["C1"].value == "hours [h]"
    assert isinstance(sheet["B2"].value, datetime) and sheet["C2"].data_type == "n"
    result = runner.invoke(main, ["export", "pumps", "-"])
    assert result.exit_code == 0 and "'=1+1" in result.output and "\n=1+1" not in result.output


def _load_everything_after_pumps(db):
    with db.sessions.begin() as session:
        import_table(session, "readings", pd.DataFrame({
            "pump": ["T-101", "T-101", "=1+1"], "taken_at": ["2024-03-01 08:00", "2024-04-01 08:30", "2024-03-02"],
            "hours": ["1000", "1500", "10"], "outlet_pressure": ["230", "240", "150"],
            "speed": ["1490", "1495", "1440"], "oil_temp": ["48", "-3.5", "44"], "note": ["", "@SUM(A1)", "-2+3"]}))


# --- import: round trip, cells named, whole or nothing -------------------------------------------------------

def test_xlsx_export_import_round_trips_every_kind(db, empty_database_url, tmp_path):
    from fleet.db import migrate
    from fleet.db.engine import make_engine, make_session_factory

    _load_everything(db)
    with db.sessions.begin() as session:
        session.execute(update(Pump).where(Pump.serial == "T-103").values(note="=1+1", oil_temp_min_c=-3.5))
        session.execute(update(MaintenanceEvent).values(note="@SUM(A1)"))
    files, csv_before = {}, {}
    with db.sessions() as session:
        for kind in LOAD_ORDER:
            content, _ = export_xlsx(session, kind)
            files[kind] = tmp_path / f"{kind}.xlsx"
            files[kind].write_bytes(content)
            csv_before[kind] = export_csv(session, kind)[0]
    if db.url == empty_database_url:
        empty_database_url = f"sqlite:///{tmp_path / 'second.sqlite'}"
    engine = make_engine(empty_database_url)
    migrate.upgrade(engine)
    second = make_session_factory(engine)
    with second.begin() as session:
        for kind in LOAD_ORDER:
            import_file(session, kind, files[kind])
    with second() as session:
        for kind in LOAD_ORDER:
            _same_table(export_csv(session, kind)[0], csv_before[kind], kind)
        # The guard quote is dropped on import: the stored text is the original.
        assert session.scalar(select(Pump.note).where(Pump.serial == "T-103")) == "=1+1"
        assert session.scalar(select(Pump.oil_temp_min_c).where(Pump.serial == "T-103")) == -3.5
        assert set(session.scalars(select(MaintenanceEvent.note))) == {"@SUM(A1)"}
    engine.dispose()


def _same_table(text: str, expected: str, kind: str) -> None:
    """Equal CSV text, but numbers only to the 16 significant digits openpyxl writes ('%.16g'): a double needs 17
    to come back bit for bit (IEEE 754 binary64), so they may differ by half a unit in the 16th digit."""
    got, want = (list(csv.reader(io.StringIO(t))) for t in (text, expected))
    assert len(got) == len(want), kind
    for row_got, row_want in zip(got, want, strict=True):
        for a, b in zip(row_got, row_want, strict=True):
            try:
                assert math.isclose(float(a), float(b), rel_tol=1e-15), (kind, a, b)
            except ValueError:
                assert a == b, (kind, a, b)


def test_a_bad_cell_is_named_by_its_reference_and_nothing_is_written(db, cli_env, tmp_path):
    _load_everything(db)
    header = ["pump", "taken_at", "hours [h]", "outlet_pressure [bar]", "speed [rpm]", "oil_temp [degC]"]
    good = [["T-101", datetime(2024, 5, day, 8, 0), 2000 + day, 230, 1490, 50.5] for day in range(1, 6)]
    bad = ["T-101", datetime(2024, 5, 9, 8, 0), "lots", 230, 1490, 50]
    path = tmp_path / "readings.xlsx"
    # Rows 2-6 good, row 7 blank (skipped, as a blank CSV line is), row 8 bad in column C.
    _workbook(path, [header, *good, [None] * 6, bad])
    with db.sessions() as session:
        before = session.scalar(select(func.count()).select_from(Reading))
    with pytest.raises(ImportRejected) as caught, db.sessions.begin() as session:
        import_file(session, "readings", path)
    (problem,) = caught.value.problems
    assert (problem.row, problem.column, problem.cell) == (8, "hours", "C8")
    assert str(problem) == "row 8, column 'hours' (cell C8): 'lots' is not a number"
    result = CliRunner().invoke(main, ["import", "readings", str(path)])
    assert result.exit_code == 1 and "row 8, column 'hours' (cell C8): 'lots' is not a number" in result.output
    with db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Reading)) == before  # whole or nothing

    # The same rows without the bad one go in whole, Excel dates read as the times they show.
    _workbook(path, [header, *good])
    result = CliRunner().invoke(main, ["import", "readings", str(path)])
    assert result.exit_code == 0, result.output
    with db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Reading)) == before + 5
        stored = session.scalar(select(Reading).where(Reading.taken_at == datetime(2024, 5, 3, 8, 0)))
        assert (stored.hours, stored.temp_c) == (2003, 50.5)


def test_sheet_cells_are_read_as_the_csv_reader_reads_text(tmp_path):
    path = tmp_path / "cells.xlsx"
    _workbook(path, [["pump", "taken_at", "hours", "note", "flag"],
                     [101, datetime(2024, 5, 1, 8, 30), 2000.0, "'=1+1", True],
                     ["T-1", datetime(2024, 5, 1, 8, 30, 15, 250000), 0.1, None, False]])
    sheet = read_xlsx(path)
    assert sheet.table.to_dict("records") == [
        {"pump": "101", "taken_at": "2024-05-01 08:30:00", "hours": "2000", "note": "=1+1", "flag": "yes"},
        {"pump": "T-1", "taken_at": "2024-05-01 08:30:15.250", "hours": "0.1", "note": "", "flag": "no"},
    ]
    assert sheet.rows == [2, 3] and sheet.letters == ["A", "B", "C", "D", "E"]


def test_a_formula_without_a_saved_value_is_refused_by_cell(tmp_path):
    path = tmp_path / "formula.xlsx"
    _workbook(path, [["pump", "hours"], ["T-101", "=1+1"]])  # openpyxl saves formulas without values
    with pytest.raises(ImportRejected) as caught:
        read_xlsx(path)
    (problem,) = caught.value.problems
    assert (problem.row, problem.column, problem.cell) == (2, "hours", "B2")
    assert "no saved value" in problem.reason


def test_a_broken_workbook_is_one_clear_problem(db, tmp_path):
    path = tmp_path / "broken.xlsx"
    path.write_bytes(b"this is not a workbook")
    with pytest.raises(ImportRejected) as caught, db.sessions.begin() as session:
        import_file(session, "readings", path)
    assert caught.value.problems[0].row == 1
    assert "not readable as an .xlsx workbook" in caught.value.problems[0].reason


# --- the web: upload and page twins --------------------------------------------------------------------------

def test_upload_page_takes_xlsx(client, demo_db):
    header = ["pump", "date", "kind", "cost", "downtime [h]"]
    buffer = io.BytesIO()
    book = openpyxl.Workbook()
    book.active.append(header)
    book.active.append(["EY-101", datetime(2024, 1, 10), "filter change", 90, 1.5])
    book.active.append(["EY-101", datetime(2024, 1, 11), "tune-up", 90, 1.5])
    book.save(buffer)
    with demo_db.sessions() as session:
        before = session.scalar(select(func.count()).select_from(MaintenanceEvent))
    # No .xlsx name: the content says it is a workbook.
    refused = client.post("/register/upload.json", data={"kind": "events", "file": (io.BytesIO(buffer.getvalue()),
                                                                                     "events.bin")},
                          content_type="multipart/form-data")
    assert refused.status_code == 400
    assert [(p["row"], p["column"], p["cell"]) for p in refused.get_json()["problems"]] == [(3, "kind", "C3")]
    page = client.post("/register/upload", data={"kind": "events", "file": (io.BytesIO(buffer.getvalue()),
                                                                            "events.xlsx")},
                       content_type="multipart/form-data")
    assert page.status_code == 400 and "C3" in page.get_data(as_text=True)
    with demo_db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(MaintenanceEvent)) == before

    book.active.delete_rows(3)
    buffer = io.BytesIO()
    book.save(buffer)
    done = client.post("/register/upload.json", data={"kind": "events", "file": (io.BytesIO(buffer.getvalue()),
                                                                                  "events.xlsx")},
                       content_type="multipart/form-data")
    assert done.status_code == 200 and done.get_json()["outcome"]["created"] == 1
    with demo_db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(MaintenanceEvent)) == before + 1


@pytest.mark.parametrize("path", ["/index", "/plan", "/review", "/register"])
def test_page_xlsx_twins_match_the_csv_twins(client, demo_db, path):
    with demo_db.sessions.begin() as session:  # a serial on this page renamed to one that would run as a formula
        serials = set(session.scalars(select(Pump.serial)))
        shown = [r["pump"] for r in csv.DictReader(io.StringIO(client.get(f"{path}.csv").get_data(as_text=True)))]
        serial = next(s for s in shown if s in serials)
        session.execute(update(Pump).where(Pump.serial == serial).values(serial="=1+1"))
    text = client.get(f"{path}.csv").get_data(as_text=True)
    twin = client.get(f"{path}.xlsx")
    assert twin.status_code == 200 and twin.mimetype == XLSX_MIMETYPE
    assert twin.headers["Content-Disposition"].endswith('.xlsx"')
    sheet = openpyxl.load_workbook(io.BytesIO(twin.get_data())).active
    rows = list(csv.reader(io.StringIO(text)))
    assert [c.value for c in sheet[1]] == rows[0]
    assert sheet.max_row == len(rows)
    assert all(c.data_type != "f" for line in sheet.iter_rows() for c in line)
    assert "'=1+1" in text and "\n=1+1" not in text and ",=1+1" not in text
    assert "'=1+1" in [c.value for line in sheet.iter_rows() for c in line]
    numbers = [c for line in sheet.iter_rows(min_row=2) for c in line if c.data_type == "n" and c.value is not None]
    assert numbers  # numbers go in as numbers
    html = client.get(path if path != "/index" else "/").get_data(as_text=True)
    assert f'href="{path}.xlsx"' in html
