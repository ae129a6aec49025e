"""Files of one import kind as a table of text cells: CSV or .xlsx, chosen by the file's content or name.

Both readers give text cells exactly alike (the parser decides types) with the export's formula guard undone
(``fleet.io.formulas.unguard``), so an exported file imports back to what was stored.

A CSV is read by pyarrow's reader, every column as text held in Arrow (the parser's column operations then run
as Arrow kernels over whole columns). A file that reader would read differently from the rules below (a space
before a quoted cell, which ``skipinitialspace`` allows) or cannot read at all (ragged rows, bad UTF-8, no
header) goes to pandas' own reader, which gives the established cells or the established error.
"""

import csv
import io
import re
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.csv as arrow_csv

from fleet.io.formulas import unguard_table
from fleet.io.spreadsheet import XLSX_SUFFIX, Sheet, is_xlsx, read_xlsx

_BLANK_THEN_QUOTE = re.compile(rb"[ \t][\"']")
UTF8_BOM = b"\xef\xbb\xbf"
# One thread: the machine's cores are shared, and one thread over 1 MB blocks measured fastest here.
_READ_OPTIONS = {"use_threads": False, "block_size": 1 << 20}


def read_csv(source: str | Path | bytes) -> pd.DataFrame:
    """A CSV as text cells (types are decided by the column specs, not guessed)."""
    data = source if isinstance(source, bytes) else Path(source).read_bytes()
    table = _read_arrow(data)
    if table is None:
        table = pd.read_csv(io.BytesIO(data), dtype=str, keep_default_na=False, skipinitialspace=True,
                            encoding="utf-8-sig")
    return unguard_table(table)


def _read_arrow(data: bytes) -> pd.DataFrame | None:
    """The cells through pyarrow's reader as Arrow text, or None when pandas' reader must decide."""
    body = data[len(UTF8_BOM):] if data.startswith(UTF8_BOM) else data
    if (b'"' in body or b"'" in body) and _BLANK_THEN_QUOTE.search(body):
        return None  # skipinitialspace reads a quoted cell, or the formula guard, after blanks otherwise
    end = body.find(b"\n")
    first_line = body if end < 0 else body[:end]
    if b'"' in first_line:
        return None  # a quoted header may hold a line break
    try:
        header = next(csv.reader([first_line.decode("utf-8").rstrip("\r")]))
    except (UnicodeDecodeError, StopIteration, csv.Error):
        return None
    names = [name.lstrip(" ") for name in header]
    if not names or len(set(names)) != len(names) or not all(names):
        return None  # pandas names repeated and blank headers its own way
    try:
        table = arrow_csv.read_csv(
            io.BytesIO(body),
            read_options=arrow_csv.ReadOptions(column_names=names, skip_rows=1, **_READ_OPTIONS),
            parse_options=arrow_csv.ParseOptions(newlines_in_values=b'"' in body),
            convert_options=arrow_csv.ConvertOptions(column_types=dict.fromkeys(names, pa.string()),
                                                     strings_can_be_null=False, quoted_strings_can_be_null=False))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    return pd.DataFrame({name: pd.Series(pd.arrays.ArrowExtensionArray(table.column(position)), copy=False)
                         for position, name in enumerate(names)})


def is_xlsx_path(path: str | Path) -> bool:
    return Path(path).suffix.lower() == XLSX_SUFFIX


def read_file(source: str | Path | bytes, filename: str | None = None) -> tuple[pd.DataFrame, Sheet | None]:
    """The text cells of a file, and the sheet they came from when it is a workbook (for cell references).

    A path is a workbook when its name ends in .xlsx; bytes (an upload) when their content is one, or, when they
    are no zip at all, when ``filename`` ends in .xlsx (so a broken workbook is reported as such, not as CSV)."""
    workbook = is_xlsx(source, filename) if isinstance(source, bytes) else is_xlsx_path(source)
    if workbook:
        sheet = read_xlsx(source)
        return sheet.table, sheet
    return read_csv(source), None
