"""No live formulas in what fleet writes: text a spreadsheet would run as a formula is neutralised.

A spreadsheet treats a cell that starts with ``=``, ``+``, ``-`` or ``@`` as a formula, and a leading tab or
carriage return can hide one; a serial or note of ``=1+1`` must not run when a plant opens an export. Every export
path (``fleet export`` as CSV or xlsx, and the .csv/.xlsx twins of the pages) passes its values through ``guard``:
such text gets a leading single quote (the neutralisation OWASP's guidance on CSV injection describes). Numbers are
numbers, never guarded: -3.5 stays a number, and so does text that is only a plain number ('-3.5').

Importing a file undoes exactly this guard (``unguard``), so an exported file imports back to the text that was
stored. To keep that exact, text that already starts with quotes followed by a formula character gets one more
quote on the way out: ``'=x`` goes out as ``''=x`` and comes back as ``'=x``.
"""

import re

import pandas as pd

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
GUARD = "'"
_PLAIN_NUMBER = re.compile(r"-?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def needs_guard(text: str) -> bool:
    """True when ``text`` (after any leading quotes) starts like a formula and is not just a number."""
    bare = text.lstrip(GUARD)
    if not bare.startswith(FORMULA_STARTS):
        return False
    return bare != text or _PLAIN_NUMBER.fullmatch(bare) is None


def guard(value):
    """A value as an export writes it: formula-like text gets a leading quote; anything else is unchanged."""
    if isinstance(value, str) and needs_guard(value):
        return GUARD + value
    return value


def unguard(value):
    """Undo ``guard`` on a cell read from a file: one leading quote before formula-like text is dropped."""
    if isinstance(value, str) and value.startswith(GUARD) and needs_guard(value[1:]):
        return value[1:]
    return value


def unguard_table(table: pd.DataFrame) -> pd.DataFrame:
    """Every text cell of a file's table with the export guard undone."""
    return table.apply(_unguard_column) if len(table.columns) else table


def _unguard_column(column: pd.Series) -> pd.Series:
    """``unguard`` over a column; only cells that start with the guard can change, so only they are looked at."""
    if not pd.api.types.is_string_dtype(column.dtype) or column.dtype == object:
        return column.map(unguard)
    quoted = column.str.startswith(GUARD).to_numpy(dtype=bool, na_value=False)
    if not quoted.any():
        return column
    column = column.copy()
    column[quoted] = column[quoted].map(unguard)
    return column
