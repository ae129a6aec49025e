"""Files of one import kind as a table of text cells: CSV or .xlsx, chosen by the file's content or name.

Both readers give text cells exactly alike (the parser decides types) with the export's formula guard undone
(``fleet.io.formulas.unguard``), so an exported file imports back to what was stored.
"""

import io
from pathlib import Path

import pandas as pd

from fleet.io.formulas import unguard_table
from fleet.io.spreadsheet import XLSX_SUFFIX, Sheet, is_xlsx, read_xlsx


def read_csv(source: str | Path | bytes) -> pd.DataFrame:
    """A CSV as text cells (types are decided by the column specs, not guessed)."""
    opened = io.BytesIO(source) if isinstance(source, bytes) else source
    table = pd.read_csv(opened, dtype=str, keep_default_na=False, skipinitialspace=True, encoding="utf-8-sig")
    return unguard_table(table)


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
