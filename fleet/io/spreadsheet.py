"""Spreadsheets (.xlsx) in and out, with the columns of the CSV files. Pure: no database, no web.

Reading gives the same table of text cells the CSV reader gives, so one parser (``fleet.io.parse``) decides every
type: a number cell becomes its text (an integral number without '.0', so a serial typed as 101 stays '101'), a
cell typed as an Excel date or time becomes ISO 8601 text (to the millisecond, the precision of an Excel date), yes
and no stay text, a formula gives the value the spreadsheet saved with it. The first sheet is read; its first row
holds the headers, and fully blank rows are skipped (as the CSV reader skips blank lines). Every problem names the
sheet's own row and the cell (``B7``), so it can be found in the file.

Writing puts numbers in as numbers, times as Excel dates, text through the formula guard
(``fleet.io.formulas.guard``), and the headers as given (with their units, as the CSV export writes them).
"""

import io
import math
import re
import zipfile
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from datetime import date, datetime, time, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from fleet import units
from fleet.io.formulas import guard, unguard
from fleet.io.parse import ImportRejected, Problem
from fleet.io.places import RowPlaces

XLSX_SUFFIX = ".xlsx"
XLSX_MIMETYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
DATETIME_FORMAT = "yyyy-mm-dd hh:mm:ss"


class SpreadsheetError(ValueError):
    """A file that is not a readable .xlsx workbook."""


@dataclass
class Sheet:
    """The text cells of a sheet as the importer takes them, and where each came from."""

    table: pd.DataFrame  # headers from the sheet's first row; every cell text ("" when blank)
    rows: list[int]  # the sheet's row number of each table row
    letters: list[str]  # the sheet's column letter of each table column

    def locate(self, rejected: ImportRejected) -> ImportRejected:
        """The same problems with the sheet's row numbers and cell references (a header problem names row 1)."""
        by_name = {}
        for header, letter in zip(self.table.columns, self.letters, strict=True):
            by_name.setdefault(str(header), letter)
            try:
                by_name.setdefault(units.parse_header(str(header))[0], letter)
            except units.UnitError:
                pass
        places, located = RowPlaces(self.rows), []
        for problem in rejected.problems:
            row = places.row(problem.row)
            letter = by_name.get(problem.column)
            located.append(replace(problem, row=row, cell=f"{letter}{row}" if letter and row >= 1 else None))
        return ImportRejected(located)

    def locate_doubts(self, doubts: list[dict]) -> list[dict]:
        """Doubts about stored rows with the sheet's own row numbers."""
        return RowPlaces(self.rows).locate_doubts(doubts)


def is_xlsx(data: bytes, filename: str | None = None) -> bool:
    """An .xlsx workbook by its content (a zip holding xl/workbook.xml), or by its name when it is no zip at all."""
    if data[:4] == b"PK\x03\x04":
        try:
            with zipfile.ZipFile(io.BytesIO(data)) as archive:
                return "xl/workbook.xml" in archive.namelist()
        except zipfile.BadZipFile:
            pass
    return bool(filename) and Path(filename).suffix.lower() == XLSX_SUFFIX


def read_xlsx(source: str | Path | bytes) -> Sheet:
    """The first sheet of a workbook as text cells (see the module's notes); a file that is no workbook raises
    SpreadsheetError, a formula without a saved value raises ImportRejected naming its cell."""
    from openpyxl import load_workbook
    from openpyxl.utils import get_column_letter

    opened = io.BytesIO(source) if isinstance(source, bytes) else source
    try:
        formulas = load_workbook(opened, read_only=True, data_only=False)
    except (zipfile.BadZipFile, KeyError, OSError, ValueError) as exc:
        raise SpreadsheetError(f"{exc.__class__.__name__}: {exc}") from exc
    try:
        raw = [list(row) for row in formulas.worksheets[0].iter_rows(values_only=True)] if formulas.worksheets else []
    finally:
        formulas.close()
    formula_cells = [(r, c) for r, row in enumerate(raw) for c, v in enumerate(row)
                     if isinstance(v, str) and v.startswith("=")]
    if formula_cells:  # the values the spreadsheet saved with its formulas
        if isinstance(opened, io.BytesIO):
            opened.seek(0)
        saved = load_workbook(opened, read_only=True, data_only=True)
        try:
            values = [list(row) for row in saved.worksheets[0].iter_rows(values_only=True)]
        finally:
            saved.close()
        problems = []
        for r, c in formula_cells:
            value = values[r][c] if r < len(values) and c < len(values[r]) else None
            if value is None:
                cell = f"{get_column_letter(c + 1)}{r + 1}"
                problems.append(Problem(r + 1, str(raw[0][c] if raw and c < len(raw[0]) else ""),
                                        f"holds the formula {raw[r][c][:40]!s} with no saved value: open and save "
                                        "the file in a spreadsheet program, or type the value", cell=cell))
            raw[r][c] = value
        if problems:
            raise ImportRejected(problems)
    if not raw:
        return Sheet(pd.DataFrame(), [], [])
    width = max(len(row) for row in raw)
    text = [[_text(row[c]) if c < len(row) else "" for c in range(width)] for row in raw]
    headers = text[0]
    keep = [c for c in range(width) if headers[c].strip() or any(row[c].strip() for row in text[1:])]
    body = [(number, row) for number, row in enumerate(text[1:], start=2) if any(row[c].strip() for c in keep)]
    table = pd.DataFrame([[row[c] for c in keep] for _, row in body], columns=[headers[c] for c in keep],
                         dtype=object)
    return Sheet(table, [number for number, _ in body], [get_column_letter(c + 1) for c in keep])


def _text(value) -> str:
    """One cell as the CSV reader would have read it."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isfinite(value) and value.is_integer() and abs(value) < 1e15:
            return str(int(value))
        return repr(value)
    if isinstance(value, datetime):
        stamp = pd.Timestamp(value).round("ms").to_pydatetime()
        return stamp.isoformat(sep=" ", timespec="milliseconds" if stamp.microsecond else "seconds")
    if isinstance(value, date):
        return value.isoformat()
    if isinstance(value, time | timedelta):
        return str(value)
    return unguard(str(value))


def write_xlsx(headers: Sequence[str], rows: Iterable[Sequence], title: str = "fleet") -> bytes:
    """A workbook of one sheet: ``headers`` in the first row, then ``rows``. Numbers stay numbers, times become
    Excel dates, blank and NaN become empty cells, text passes the formula guard."""
    from openpyxl import Workbook
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.utils import get_column_letter

    book = Workbook(write_only=True)
    sheet = book.create_sheet(title=re.sub(r"[\[\]:*?/\\']", "-", title)[:31] or "fleet")
    sheet.freeze_panes = "A2"
    for position, header in enumerate(headers, start=1):
        sheet.column_dimensions[get_column_letter(position)].width = max(10, min(40, len(str(header)) + 2))
    sheet.append([guard(str(header)) for header in headers])

    def cell(value):
        value = _plain(value)
        if isinstance(value, datetime):
            written = WriteOnlyCell(sheet, value)
            written.number_format = DATETIME_FORMAT
            return written
        return guard(value)

    for row in rows:
        sheet.append([cell(value) for value in row])
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


def frame_to_xlsx(frame: pd.DataFrame, title: str = "fleet") -> bytes:
    """A table (headers with units, as an export makes it) as a workbook."""
    return write_xlsx([str(c) for c in frame.columns], frame.itertuples(index=False, name=None), title)


def _plain(value):
    """A value as openpyxl takes it: None for blanks, Python numbers and datetimes for numpy and pandas ones."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, list | tuple):
        return " | ".join(str(v) for v in value)
    if isinstance(value, dict):
        return str(value)
    return value
