"""Blank rows, tab-separated files and files that are not UTF-8, as people save them from spreadsheets and editors.

A spreadsheet and a text editor count every row, blank ones too, so a problem or doubt must name the row where
the file has it. References: Python's csv module (the cells and each record's line), and the rows counted by hand
in the literal files below."""

import csv
import io
from datetime import datetime

import pytest

from fleet.io.files import NotUtf8, read_csv, read_csv_placed, stream_csv
from fleet.io.parse import ImportRejected
from fleet.services.transfer.importing import import_file
from fleet.services.transfer.uploads import upload_file
from tests.conftest import readings_stored

HEADER = "pump,taken_at,hours,outlet_pressure,speed,outlet_flow,oil_temp"


def _csv_records(text: str, delimiter: str = ",") -> list[tuple[int, list[str]]]:
    """(the file's row, cells) of each non-blank record under the header, by Python's csv module."""
    reader = csv.reader(io.StringIO(text), delimiter=delimiter, skipinitialspace=True)
    next(reader)
    records = []
    for cells in reader:
        if any(cell.strip() for cell in cells):
            records.append((reader.line_num, cells))  # one record per line in these files: its line is its row
    return records


MESSY = (f"{HEADER}\n"
         "\n"                                           # row 2: an empty line
         "T-101,2025-03-01 08:00,100,230,1490,63.1,48\n"  # row 3
         ",,,,,,\n"                                      # row 4: separators only, as a spreadsheet saves a used row
         " , ,,,,,\n"                                    # row 5: white space only
         "T-101,2025-03-02 08:00,110,230,1490,63.1,48\n"  # row 6
         "\n\n")


@pytest.mark.parametrize("newline", ["\n", "\r\n"])
def test_blank_rows_are_left_out_and_the_rest_keep_the_file_rows(newline):
    text = MESSY.replace("\n", newline)
    table, places = read_csv_placed(text.encode())
    expected = _csv_records(MESSY)
    assert table.astype(object).values.tolist() == [cells for _, cells in expected]
    assert list(places.rows) == [row for row, _ in expected] == [3, 6]
    plain = f"{HEADER}\nT-101,2025-03-01 08:00,100,230,1490,63.1,48\n"
    assert read_csv_placed(plain.encode())[1] is None  # nothing left out: the table's rows are the file's


def test_a_tab_separated_file_gives_the_cells_of_its_comma_twin():
    comma = f"{HEADER},note\nT-101,2025-03-01 08:00,100,230,1490,63.1,48,\"worn, noisy\"\n"
    tabs = comma.replace(",", "\t").replace("\t noisy", ", noisy").replace('"worn\t', '"worn,')
    assert "\t" in tabs and '"worn, noisy"' in tabs
    expected = list(csv.reader(io.StringIO(comma)))
    cells = read_csv(tabs.encode())
    assert [list(cells.columns)] + cells.astype(object).values.tolist() == expected


BAD_AFTER_BLANKS = (f"{HEADER}\n"
                    "T-101,2025-03-01 08:00,100,230,1490,63.1,48\n"  # row 2
                    "\n"                                            # row 3
                    ",,,,,,\n"                                       # row 4
                    "T-101,2025-03-02 08:00,110,230,-5,63.1,48\n")   # row 5: the bad speed


def test_a_problem_after_blank_rows_names_the_file_row(small_register, tmp_path):
    path = tmp_path / "readings.csv"
    path.write_text(BAD_AFTER_BLANKS)
    streamed = stream_csv(path)
    assert streamed is not None  # the file starts streamed; its blank rows send it to the whole-file reader
    streamed.close()
    with pytest.raises(ImportRejected) as caught, small_register.sessions.begin() as session:
        import_file(session, "readings", path)
    assert [(p.row, p.column) for p in caught.value.problems] == [(5, "speed")]
    outcome = upload_file(small_register.sessions, "readings", BAD_AFTER_BLANKS.encode(), "readings.csv")
    assert not outcome["ok"] and [(p["row"], p["column"]) for p in outcome["problems"]] == [(5, "speed")]
    assert readings_stored(small_register) == 0  # nothing half-written


def test_a_doubt_after_blank_rows_names_the_file_row(small_register, tmp_path):
    # The second reading's hour meter runs backwards (fleet.io.meter): stored, and named for a second look.
    text = BAD_AFTER_BLANKS.replace("-5", "1490").replace(",110,", ",50,")
    path = tmp_path / "readings.csv"
    path.write_text(text)
    with small_register.sessions.begin() as session:
        result = import_file(session, "readings", path, now=datetime(2026, 1, 1))
    assert [(d["row"], d["field"]) for d in result.doubts] == [(5, "hours")]
    assert readings_stored(small_register) == 2


def test_a_file_that_is_not_utf8_is_refused_naming_its_row_and_column(small_register, tmp_path):
    text = f"{HEADER},taken_by\nT-101,2025-03-01 08:00,100,230,1490,63.1,48,J. M\u00fcller\n"
    data = text.encode("cp1252")  # as a spreadsheet's plain CSV saves it on many desktops
    with pytest.raises(NotUtf8) as caught:
        read_csv(data)
    assert (caught.value.row, caught.value.column) == (2, "taken_by")
    outcome = upload_file(small_register.sessions, "readings", data, "readings.csv")
    (problem,) = outcome["problems"]
    assert (problem["row"], problem["column"]) == (2, "taken_by")
    assert "0xFC" in problem["reason"] and "CSV UTF-8" in problem["reason"]
    assert readings_stored(small_register) == 0


def _workbook(path, first_day: int, second_hours: float) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    for row in [HEADER.split(","), ["T-101", f"2025-03-{first_day:02d} 08:00", 100, 230, 1490, 63.1, 48], [None] * 7,
                ["T-101", f"2025-03-{first_day + 1:02d} 08:00", second_hours, 230, 1490, 63.1, 48]]:
        book.active.append(row)
    book.save(path)


def test_a_workbooks_doubt_after_a_blank_row_names_the_sheet_row(small_register, tmp_path):
    path = tmp_path / "readings.xlsx"
    _workbook(path, 1, 50)  # sheet row 4: the meter ran backwards from 100 h
    with small_register.sessions.begin() as session:
        result = import_file(session, "readings", path, now=datetime(2026, 1, 1))
    assert [(d["row"], d["field"]) for d in result.doubts] == [(4, "hours")]
    # The upload page's path, two days on: row 2 jumps from the stored 50 h to 100 h in a day, row 4 runs back.
    _workbook(path, 3, 40)
    outcome = upload_file(small_register.sessions, "readings", path.read_bytes(), "readings.xlsx")
    assert outcome["ok"] and [(d["row"], d["field"]) for d in outcome["doubts"]] == [(2, "hours"), (4, "hours")]
