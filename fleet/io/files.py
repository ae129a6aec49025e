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
import queue
import re
import threading
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as arrow_csv

from fleet.io.formulas import GUARD, unguard_table
from fleet.io.places import RowPlaces
from fleet.io.spreadsheet import XLSX_SUFFIX, Sheet, is_xlsx, read_xlsx

_BLANK_THEN_QUOTE = re.compile(rb"[ \t][\"']")
UTF8_BOM = b"\xef\xbb\xbf"
# One thread: the machine's cores are shared, and one thread over 1 MB blocks measured fastest here.
_READ_OPTIONS = {"use_threads": False, "block_size": 1 << 20}


def delimiter(data: bytes) -> str:
    """The CSV's column separator: a semicolon when its header line has semicolons and no comma (as spreadsheets
    save CSV where the comma is the decimal mark), a tab when it has tabs and neither (a spreadsheet's tab-delimited
    text), else the comma."""
    body = data[len(UTF8_BOM):] if data.startswith(UTF8_BOM) else data
    end = body.find(b"\n")
    first_line = body if end < 0 else body[:end]
    if b"," in first_line:
        return ","
    if b";" in first_line:
        return ";"
    return "\t" if b"\t" in first_line else ","


class NotUtf8(ValueError):
    """A CSV that is not UTF-8 text, with the file's row (and column, when the header tells) of its first bad byte."""

    def __init__(self, row: int, column: str, byte: int):
        self.row, self.column = row, column
        super().__init__(f"byte 0x{byte:02X} is not UTF-8 text: the file was saved in another encoding (a "
                         "spreadsheet's plain 'CSV' often is); save it as 'CSV UTF-8' or as an .xlsx workbook and "
                         "import it again")


def read_csv(source: str | Path | bytes) -> pd.DataFrame:
    """A CSV as text cells (types are decided by the column specs, not guessed), without its blank rows."""
    return read_csv_placed(source)[0]


def read_csv_placed(source: str | Path | bytes) -> tuple[pd.DataFrame, RowPlaces | None]:
    """A CSV as text cells without the rows whose every cell is blank (an empty line, or a row of separators only,
    as a spreadsheet saves the rows it once used), and where the rows kept lie in the file when any were left out
    (None: the table's rows are the file's, in order)."""
    data = source if isinstance(source, bytes) else Path(source).read_bytes()
    table = _read_arrow(data)
    if table is None:
        try:
            table = pd.read_csv(io.BytesIO(data), dtype=str, keep_default_na=False, skipinitialspace=True,
                                encoding="utf-8-sig", sep=delimiter(data), skip_blank_lines=False)
        except UnicodeDecodeError:
            raise _not_utf8(data) from None
    blank = blank_rows(table)
    if not blank.any():
        return unguard_table(table), None
    kept = np.flatnonzero(~blank)
    return unguard_table(table.iloc[kept].reset_index(drop=True)), RowPlaces((kept + 2).tolist())


def blank_rows(table: pd.DataFrame) -> np.ndarray:
    """Which rows have every cell blank or white space only (asked of the first column first: that is
    almost never blank, so a file without such rows costs one column's look)."""
    if not len(table.columns):
        return np.zeros(len(table), dtype=bool)
    blank = _blank_cells(table.iloc[:, 0])
    if not blank.any():
        return blank
    for position in range(1, len(table.columns)):
        candidates = np.flatnonzero(blank)
        blank[candidates] = _blank_cells(table.iloc[candidates, position])
        if not blank.any():
            break
    return blank


def _blank_cells(column: pd.Series) -> np.ndarray:
    return np.array(column.fillna("").astype(str).str.strip() == "", dtype=bool)  # a copy: written to


def _not_utf8(data: bytes) -> NotUtf8:
    """Where a CSV's first byte that is not UTF-8 lies: its row (a line, as a text editor counts them; a quoted
    line break inside a cell would count one more) and its column by the header, when the line says."""
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as error:
        start = error.start
    else:
        start = 0
    line_start = data.rfind(b"\n", 0, start) + 1
    row = data.count(b"\n", 0, start) + 1
    separator = delimiter(data)
    body = data[len(UTF8_BOM):] if data.startswith(UTF8_BOM) else data
    header = body.split(b"\n", 1)[0].decode("utf-8", "replace").rstrip("\r")
    names = next(csv.reader([header], delimiter=separator), [])
    before = data[line_start:start].decode("utf-8", "replace")
    position = len(next(csv.reader([before + "x"], delimiter=separator), [""])) - 1
    column = names[position].strip() if row > 1 and 0 <= position < len(names) else ""
    return NotUtf8(row, column, data[start])


def _read_arrow(data: bytes) -> pd.DataFrame | None:
    """The cells through pyarrow's reader as Arrow text, or None when pandas' reader must decide."""
    plan = _arrow_plan(data)
    if plan is None:
        return None
    names, body, options = plan
    try:
        table = arrow_csv.read_csv(pa.BufferReader(body), **options)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None
    return _frame(table, names)


def _arrow_plan(data: bytes) -> tuple[list[str], pa.Buffer, dict] | None:
    """The header's names, the body and pyarrow's reader options for a CSV, or None when pandas' reader must
    decide (what pyarrow's reader would read differently or not at all, as far as the header and quotes tell)."""
    body = data[len(UTF8_BOM):] if data.startswith(UTF8_BOM) else data
    if (b'"' in body or b"'" in body) and _BLANK_THEN_QUOTE.search(body):
        return None  # skipinitialspace reads a quoted cell, or the formula guard, after blanks otherwise
    end = body.find(b"\n")
    first_line = body if end < 0 else body[:end]
    if b'"' in first_line:
        return None  # a quoted header may hold a line break
    separator = delimiter(data)
    try:
        header = next(csv.reader([first_line.decode("utf-8").rstrip("\r")], delimiter=separator))
    except (UnicodeDecodeError, StopIteration, csv.Error):
        return None
    names = [name.lstrip(" ") for name in header]
    if not names or len(set(names)) != len(names) or not all(names):
        return None  # pandas names repeated and blank headers its own way
    options = {
        "read_options": arrow_csv.ReadOptions(column_names=names, skip_rows=1, **_READ_OPTIONS),
        "parse_options": arrow_csv.ParseOptions(delimiter=separator, newlines_in_values=b'"' in body,
                                                ignore_empty_lines=False),  # a blank line is a row, as counted
        "convert_options": arrow_csv.ConvertOptions(column_types=dict.fromkeys(names, pa.string()),
                                                    strings_can_be_null=False, quoted_strings_can_be_null=False)}
    start = len(data) - len(body)
    # Line breaks at the very end make blank rows of nothing: left off here, so the streamed reader need not stop.
    end = len(data)
    while end > start and data[end - 1] in b"\r\n":  # counted from the end: rstrip would copy a large file
        end -= 1
    return names, pa.py_buffer(data)[start:end], options


def _unguarded_frame(table: pa.Table, names: list[str]) -> pd.DataFrame:
    """A block's cells with the export guard undone, as ``unguard_table`` gives them; a block in which no cell
    starts with the guard's quote (Arrow's kernel asks each column at once) is given as it is. A block with a
    blank row raises StreamBroken: the file is read whole, which leaves such rows out and keeps the file's row
    numbers (read_csv_placed)."""
    frame = _frame(table, names)
    first = table.column(0) if table.num_columns else None
    if first is not None and pc.any(pc.or_(pc.equal(first, ""), pc.utf8_is_space(first))).as_py():
        if blank_rows(frame).any():
            raise StreamBroken("a blank row")
    if any(pc.any(pc.starts_with(column, GUARD)).as_py() for column in table.columns):
        return unguard_table(frame)
    return frame


def _frame(table: pa.Table, names: list[str]) -> pd.DataFrame:
    return pd.DataFrame({name: pd.Series(pd.arrays.ArrowExtensionArray(table.column(position)), copy=False)
                         for position, name in enumerate(names)})


class StreamBroken(Exception):
    """pyarrow's reader refused a part of a streamed CSV after its first blocks were handed out: the caller undoes
    what it did with them and reads the file whole (``read_csv``, which then asks pandas' reader)."""


class StreamedCsv:
    """A CSV's cells in blocks of rows, as ``read_csv`` would give them (Arrow text, the formula guard undone),
    read by pyarrow's streaming reader in a helper thread while the caller works on the blocks before (the reader
    parses without holding the GIL). Made by ``stream_csv``; iterate ``blocks`` once."""

    # Arrow record batches read ahead of the caller at most (each about one read block, 1 MB of the file).
    AHEAD = 4

    def __init__(self, names: list[str], body: pa.Buffer, options: dict):
        self.names = names
        self._reader = arrow_csv.open_csv(pa.BufferReader(body), **options)
        self._batches: queue.Queue = queue.Queue(self.AHEAD)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._read_ahead, name="fleet-csv-reader", daemon=True)
        self._thread.start()

    def _read_ahead(self) -> None:
        outcome: object = None
        try:
            for batch in self._reader:
                if not self._put(batch):
                    return
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as error:
            outcome = StreamBroken(str(error))
        self._put(outcome)  # None: the end of the file

    def _put(self, item) -> bool:
        while not self._stop.is_set():
            try:
                self._batches.put(item, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def blocks(self, sizes: Iterator[int]) -> Iterator[pd.DataFrame]:
        """The rows in blocks of the next of ``sizes`` rows each (the last block what is left; one empty block
        for a file without rows); raises StreamBroken when pyarrow's reader refuses a later part."""
        pending: list[pa.RecordBatch] = []
        count, size, handed = 0, next(sizes), 0
        try:
            while True:
                item = self._batches.get()
                if isinstance(item, StreamBroken):
                    raise item
                if item is not None:
                    pending.append(item)
                    count += item.num_rows
                while count >= size or (item is None and (count or not handed)):
                    table = pa.Table.from_batches(pending, self._reader.schema)
                    block, rest = table.slice(0, size), table.slice(size)
                    handed += 1
                    yield _unguarded_frame(block, self.names)
                    pending, count, size = rest.to_batches(), rest.num_rows, next(sizes)
                if item is None:
                    return
        finally:
            self.close()

    def close(self) -> None:
        """Stop the reader thread (it ends at its next batch) and wait for it."""
        self._stop.set()
        self._thread.join()


def stream_csv(source: str | Path | bytes) -> StreamedCsv | None:
    """A CSV read in blocks by pyarrow's streaming reader, or None when pandas' reader must decide (then use
    ``read_csv``). What pyarrow's reader refuses further on raises StreamBroken from ``StreamedCsv.blocks``."""
    data = source if isinstance(source, bytes) else Path(source).read_bytes()
    plan = _arrow_plan(data)
    if plan is None:
        return None
    try:
        return StreamedCsv(*plan)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None


def is_xlsx_path(path: str | Path) -> bool:
    return Path(path).suffix.lower() == XLSX_SUFFIX


def read_file(source: str | Path | bytes, filename: str | None = None
              ) -> tuple[pd.DataFrame, Sheet | RowPlaces | None]:
    """The text cells of a file, and where its rows lie: the sheet they came from when it is a workbook (for cell
    references), the file's rows of a CSV's rows when blank rows were left out (read_csv_placed), else None.

    A path is a workbook when its name ends in .xlsx; bytes (an upload) when their content is one, or, when they
    are no zip at all, when ``filename`` ends in .xlsx (so a broken workbook is reported as such, not as CSV)."""
    workbook = is_xlsx(source, filename) if isinstance(source, bytes) else is_xlsx_path(source)
    if workbook:
        sheet = read_xlsx(source)
        return sheet.table, sheet
    return read_csv_placed(source)
