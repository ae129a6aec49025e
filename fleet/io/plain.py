"""A few rows of text cells read without building a table, when every cell is one the parser takes as it stands.

A device posts one reading, or the few of an offline round; the table parser (fleet.io.parse) pays for its
pandas machinery per column, whatever the number of rows. ``plain_row`` reads one row by the same declarations
(each column's type, unit, bounds and text length in fleet.io.columns, the patterns and limits of fleet.io.parse,
the rules between fields of fleet.io.rules) and gives the values parse_table would give. It never refuses a
cell itself: a cell it cannot take plainly (blank where required, a comma, an offset it would have to think
about, a bound crossed, a wall-clock time that daylight saving skips or repeats) makes it answer None, and the
caller parses the rows with parse_table, which names every problem in its words. So there is one set of words
for a refusal, and tests/test_plain_rows.py checks that both readers agree on every cell this one takes.
"""

import math
import re
from datetime import datetime

import numpy as np
import pandas as pd

from fleet import units
from fleet.io import rules
from fleet.io.columns import KINDS, Column
from fleet.io.localtime import zone
from fleet.io.parse import (
    DEFAULT_TEXT_LENGTH,
    EARLIEST,
    ISO_TIME,
    LATEST,
    MAX_MAGNITUDE,
    OFFSET,
    PLAIN_DECIMAL,
    TEXT_LENGTHS,
)
from fleet.kinds import EVENT_KINDS, FAILURE_MODES, READING_SOURCES

_PLAIN_NUMBER = re.compile(PLAIN_DECIMAL)
_ISO_TIME = re.compile(ISO_TIME)
_OFFSET = re.compile(OFFSET)
_VOCABULARIES = {"event_kind": EVENT_KINDS, "failure_mode": FAILURE_MODES, "source": READING_SOURCES}


class _NotPlain(Exception):
    """A cell the table parser must read (and perhaps refuse, in its words)."""


def plain_row(kind: str, cells: dict[str, str | None], zone_name: str | None, now: datetime) -> dict | None:
    """The canonical values of one row (``cells``: header -> text, headers as a file writes them, with or without
    '[unit]'; ``zone_name``: the IANA zone of the row's site for a time without an offset, None for UTC), keyed by
    column name and typed as parse_table's columns hold them (float with NaN for a blank number, pd.Timestamp,
    str or None); or None when any cell or header needs the table parser. Every rule between fields of
    fleet.io.rules holds for the values returned."""
    specs = {column.name: column for column in KINDS[kind]}
    values: dict = {}
    try:
        for header, text in cells.items():
            name, unit = _header(str(header), specs)
            if name in values:
                raise _NotPlain
            values[name] = _value(specs[name], text, unit, zone_name)
    except (_NotPlain, units.UnitError):
        return None
    if any(spec.required and values.get(spec.name) is None for spec in specs.values()):
        return None
    row = pd.DataFrame({name: [value] for name, value in values.items()})
    if rules.table_rules(kind, row, now):  # the rules between fields and against the clock, as the importer asks
        return None
    return values


def _header(header: str, specs: dict[str, Column]) -> tuple[str, str | None]:
    name, unit = units.parse_header(header)
    spec = specs.get(name)
    if spec is None or (unit is not None and spec.quantity is None):
        raise _NotPlain
    if unit is not None:
        units.resolve(unit, spec.quantity)  # a unit pint does not know raises UnitError
    return name, unit


def _value(spec: Column, text, unit: str | None, zone_name: str | None):
    if text is not None and not isinstance(text, str):
        raise _NotPlain
    cell = (text or "").strip()
    if not cell:
        if spec.required:
            raise _NotPlain
        return np.nan if spec.type == "number" else None
    if "\x00" in cell:
        raise _NotPlain
    try:
        cell.encode("utf-8")
    except UnicodeEncodeError:
        raise _NotPlain from None
    if spec.type == "number":
        return _number(spec, cell, unit)
    if spec.type == "datetime":
        return _moment(cell, zone_name)
    if spec.type in _VOCABULARIES:
        key = cell.lower().replace(" ", "_").replace("-", "_")
        if key not in _VOCABULARIES[spec.type]:
            raise _NotPlain
        return key
    if spec.type != "text":
        raise _NotPlain  # kinds, yes/no and ISO 4406 codes: the table parser reads them
    limit = TEXT_LENGTHS.get(spec.name, DEFAULT_TEXT_LENGTH)
    if limit is not None and len(cell) > limit:
        raise _NotPlain
    return cell


def _number(spec: Column, cell: str, unit: str | None) -> float:
    # The cells parse.py's _floats reads with float() alike, on Arrow text or not; no comma (a site's decimal
    # comma is the table parser's to judge).
    if len(cell) > 24 or not _PLAIN_NUMBER.match(cell):
        raise _NotPlain
    number = float(cell)
    unit = unit if unit is not None else spec.default_unit
    value = float(units.to_canonical(np.array([number]), unit, spec.quantity)[0]) if spec.quantity else number
    if not math.isfinite(value) or abs(value) > MAX_MAGNITUDE:
        raise _NotPlain
    if (spec.positive and value <= 0) or (spec.min is not None and value < spec.min - 1e-9) or \
            (spec.max is not None and value > spec.max + 1e-9) or (spec.integer and value != round(value)):
        raise _NotPlain
    return value


def _moment(cell: str, zone_name: str | None) -> pd.Timestamp:
    if not _ISO_TIME.fullmatch(cell) or not f"{EARLIEST.year - 1}" <= cell[:4] <= f"{LATEST.year + 1}":
        raise _NotPlain
    try:
        stamp = pd.Timestamp(cell)
    except ValueError:
        raise _NotPlain from None
    if _OFFSET.search(cell):
        stamp = stamp.tz_convert("UTC").tz_localize(None)
    else:
        key = zone(zone_name).key
        if key != "UTC":
            earlier = stamp.tz_localize(key, ambiguous=True, nonexistent="NaT")
            later = stamp.tz_localize(key, ambiguous=False, nonexistent="NaT")
            if earlier is pd.NaT or earlier != later:  # skipped or repeated by daylight saving
                raise _NotPlain
            stamp = earlier.tz_convert("UTC").tz_localize(None)
    stamp = stamp.as_unit("ns").floor("us")
    if stamp < EARLIEST or stamp > LATEST:
        raise _NotPlain
    return stamp
