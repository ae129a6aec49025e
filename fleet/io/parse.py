"""Turn a table of text cells (a CSV file, a form, a JSON body) into typed, canonical columns.

Every bad cell becomes a Problem naming its row, column and reason; nothing is dropped silently. Row numbers
count as a spreadsheet does: the header is row 1, the first data row is row 2.
"""

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from fleet import units
from fleet.io.columns import KINDS, Column
from fleet.io.localtime import localize
from fleet.kinds import EVENT_KINDS, FAILURE_MODES, PUMP_KINDS, READING_SOURCES, normalise_kind
from fleet.physics.cleanliness import parse_code
from fleet.physics.oil import ISO_VG_GRADES

# pandas 3 holds inferred text in Arrow when pyarrow is installed, and Arrow text cannot hold what a hostile form
# or API body may send (an unpaired surrogate). Text from a form, a JSON body or the database is therefore held
# as Python strings, set here once for the process; only the CSV reader (fleet.io.files) asks for Arrow text
# explicitly, whose cells are valid UTF-8 by construction.
pd.set_option("mode.string_storage", "python")

TRUE_WORDS = frozenset({"yes", "y", "true", "1", "x"})
FALSE_WORDS = frozenset({"no", "n", "false", "0", ""})
# No value fleet stores comes near this (10^12 h, bar, L/min, ...); larger ones only overflow the analysis.
MAX_MAGNITUDE = 1e12
# The longest text each column holds in the database (PostgreSQL refuses longer; SQLite would keep it silently).
TEXT_LENGTHS = {"currency": 8, "note": None, "source": None}
DEFAULT_TEXT_LENGTH = 120
# The dates fleet keeps: nothing in a plant's records is older than 1970 or planned past 2100. A moment that must
# have happened already (a reading, an installation, a sample, a maintenance event) is also no later than now
# (fleet.io.rules.not_in_future).
EARLIEST, LATEST = pd.Timestamp("1970-01-01"), pd.Timestamp("2100-12-31 23:59:59")
OFFSET = r"(?:Z|[+-]\d{2}:?\d{2})$"
# A decimal comma, where a site allows one: digits, one comma, digits. A cell that could also be read with the comma
# as a thousands separator ('12,500': 12.5 or 12500?) is refused, as is any cell with both a comma and a point.
COMMA_DECIMAL = r"[+-]?\d+,\d+"
THOUSANDS_LIKE = r"[+-]?[1-9]\d{0,2},\d{3}"
# A number Arrow's cast reads exactly as Python's float() does (fleet.io.parse._floats); anything else goes to float().
PLAIN_DECIMAL = r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d{1,3})?$"
ISO_TIME = r"\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,9})?)?)?(?:Z|[+-]\d{2}:?\d{2})?"


@dataclass(frozen=True, order=True)
class Problem:
    row: int
    column: str
    reason: str
    cell: str | None = field(default=None, compare=False)  # a spreadsheet's cell reference, e.g. B7

    def __str__(self) -> str:
        where = f" (cell {self.cell})" if self.cell else ""
        return f"row {self.row}, column '{self.column}'{where}: {self.reason}"


class ImportRejected(Exception):
    """A table with problems; nothing of it was written."""

    def __init__(self, problems: list[Problem]):
        self.problems = sorted(problems)
        super().__init__(f"{len(self.problems)} problem(s); nothing was written")

    def report(self) -> str:
        return "\n".join(str(p) for p in self.problems)


@dataclass(frozen=True)
class RowConventions:
    """How each row's site writes (the caller knows each row's site): an IANA zone for times without an offset,
    and whether a comma may be the decimal mark. Both indexed like the table's rows; None means UTC / no comma."""

    zones: pd.Series | None = None
    decimal_comma: pd.Series | None = None

    def aligned(self, index: pd.Index) -> "RowConventions":
        if all(part is None or part.index.equals(index) for part in (self.zones, self.decimal_comma)):
            return self
        zones = None if self.zones is None else pd.Series(self.zones.to_numpy(), index=index)
        comma = None if self.decimal_comma is None else pd.Series(self.decimal_comma.to_numpy(), index=index)
        return RowConventions(zones, comma)


@dataclass
class ParsedTable:
    kind: str
    data: pd.DataFrame  # one column per known column present, typed and canonical; index = file row number
    present: set[str]
    units: dict[str, str | None]  # the unit each header carried
    ignored: list[str] = field(default_factory=list)  # headers fleet does not use


def row_numbers(index: pd.Index) -> np.ndarray:
    return np.asarray(index) + 2


def is_arrow_text(series: pd.Series) -> bool:
    """Cells held as Arrow text (a CSV read by fleet.io.files), whose string methods run as Arrow kernels."""
    return isinstance(series.dtype, pd.ArrowDtype) and pa.types.is_string(series.dtype.pyarrow_dtype)


GRADE_COLUMNS = ("oil_grade", "iso_vg")  # ISO VG grade numbers (fleet.io.columns)
_GRADE_PREFIX = r"(?i)^(?:ISO[\s-]*)?VG[\s-]*(\d)"  # RE2 (Arrow's kernels) has no look-ahead: keep the digit


def _cells(series: pd.Series) -> pd.Series:
    """Text cells, stripped, with blanks as NA (a CSV's Arrow text stays Arrow, for its kernels)."""
    text = (series if is_arrow_text(series) else series.astype(pd.StringDtype("python"))).str.strip()
    return text.mask(text == "")


@dataclass
class Headers:
    """What a table's header row says: which known column sits where and in which unit, and its problems."""

    kind: str
    specs: dict[str, Column]
    found: dict[str, tuple[str, str | None]]  # spec name -> (original header, unit)
    positions: dict[str, int]  # spec name -> column position (headers may repeat in a hand-made table)
    ignored: list[str]
    problems: list[Problem]


def read_headers(kind: str, columns) -> Headers:
    """The header row of an import of ``kind``: each known column's position and unit; unknown, repeated or
    badly written headers and missing required columns as problems of row 1."""
    if kind not in KINDS:
        raise KeyError(f"unknown kind {kind!r}; one of {', '.join(KINDS)}")
    specs = {column.name: column for column in KINDS[kind]}
    problems: list[Problem] = []
    headers: dict[str, tuple[str, str | None]] = {}
    positions: dict[str, int] = {}
    ignored: list[str] = []
    for position, header in enumerate(columns):
        try:
            name, unit = units.parse_header(str(header))
        except units.UnitError as exc:
            problems.append(Problem(1, str(header), str(exc)))
            continue
        if name not in specs:
            ignored.append(str(header))
            continue
        if name in headers:
            problems.append(Problem(1, str(header), f"column '{name}' appears twice"))
            continue
        spec = specs[name]
        if unit is not None:
            if spec.quantity is None:
                problems.append(Problem(1, str(header), "this column takes a plain value, without a unit"))
                continue
            try:
                units.resolve(unit, spec.quantity)
            except units.UnitError as exc:
                problems.append(Problem(1, str(header), str(exc)))
                continue
        headers[name] = (str(header), unit)
        positions[name] = position
    for spec in specs.values():
        if spec.required and spec.name not in headers and not any(p.column.startswith(spec.name) for p in problems):
            problems.append(Problem(1, spec.name, "required column is missing"))
    return Headers(kind, specs, headers, positions, ignored, problems)


def parse_table(kind: str, table: pd.DataFrame, conventions: RowConventions | None = None
                ) -> tuple[ParsedTable, list[Problem]]:
    """Parse ``table`` (any cells; read CSVs with dtype=str) as an import of ``kind``, each row by its site's
    ``conventions`` (default: UTC, decimal point)."""
    headers = read_headers(kind, table.columns)
    parsed, problems = parse_rows(headers, table, conventions)
    return parsed, headers.problems + problems


def parse_rows(headers: Headers, table: pd.DataFrame, conventions: RowConventions | None = None,
               first: int = 0) -> tuple[ParsedTable, list[Problem]]:
    """The cells of ``table`` under ``headers``: typed columns and each bad cell's problem. ``first`` is the
    position of the table's first row in its file (a block of a larger file), so problems name the file's rows."""
    table = table.set_axis(pd.RangeIndex(first, first + len(table)), axis=0)
    conventions = (conventions or RowConventions()).aligned(table.index)
    data = pd.DataFrame(index=table.index)
    problems: list[Problem] = []
    for name, (_header, unit) in headers.found.items():
        values, column_problems = _parse_column(headers.specs[name], table.iloc[:, headers.positions[name]], unit,
                                                conventions)
        data[name] = values
        problems.extend(column_problems)
    parsed = ParsedTable(headers.kind, data, set(headers.found), {k: u for k, (_, u) in headers.found.items()},
                         headers.ignored)
    return parsed, problems


def parse_cell(spec: Column, text, unit: str | None = None, zone: str | None = None,
               decimal_comma: bool = False) -> tuple[object, list[str]]:
    """One value (a form's field) parsed exactly as a cell of a file of the same site: (canonical value or None,
    reasons)."""
    conventions = RowConventions(pd.Series([zone]), pd.Series([decimal_comma]))
    values, problems = _parse_column(spec, pd.Series(["" if text is None else str(text)], dtype=object), unit,
                                     conventions)
    value = values.iloc[0]
    if problems or value is None or value is pd.NaT or (isinstance(value, float) and np.isnan(value)):
        return None, [p.reason for p in problems]
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime(), []
    return (value.item() if isinstance(value, np.generic) else value), []


def _shown(cell) -> str:
    """A cell as an error message quotes it: cut short, so a 400-digit number does not fill the report."""
    text = str(cell)
    return text if len(text) <= 40 else text[:37] + "..."


def _not_utf8(cell: str) -> bool:
    try:
        cell.encode("utf-8")
    except UnicodeEncodeError:
        return True
    return False


def _decimal_commas(cells: pd.Series, blank: pd.Series, allowed: pd.Series | None, flag) -> pd.Series:
    """Cells with a decimal comma rewritten with a point where the row's site allows it; the others flagged."""
    comma = ~blank & cells.str.contains(",", regex=False).fillna(False).astype(bool)
    if not comma.any():
        return cells
    allowed = pd.Series(False, index=cells.index) if allowed is None else allowed.fillna(False).astype(bool)
    shaped = cells.str.fullmatch(COMMA_DECIMAL).fillna(False).astype(bool)
    doubtful = cells.str.fullmatch(THOUSANDS_LIKE).fillna(False).astype(bool)
    flag(comma & ~allowed, lambda cell: f"'{cell}' is not a number: this site writes decimals with a point "
         "(its decimal comma setting is off), and thousands are written without separators")
    flag(comma & allowed & ~shaped, lambda cell: f"'{cell}' is not a number: write one decimal comma and no "
         "thousands separators (e.g. 1250,5)")
    flag(comma & allowed & shaped & doubtful, lambda cell: f"'{cell}' could be a decimal or a thousands "
         f"separator; write {cell.replace(',', '')} for thousands or drop the trailing zeros for a decimal")
    readable = comma & allowed & shaped & ~doubtful
    return cells.mask(comma & ~readable, "").where(~readable, cells.str.replace(",", ".", regex=False))


def _parse_numbers(spec: Column, cells: pd.Series, blank: pd.Series, unit: str | None, flag,
                   decimal_comma: pd.Series | None = None) -> pd.Series:
    refused_before = len(flag.problems)
    cells = _decimal_commas(cells, blank, decimal_comma, flag)
    already = pd.Series(False, index=cells.index)
    already.iloc[[flag.positions[i] for i in range(refused_before, len(flag.problems))]] = True
    blank = blank | already
    numbers = pd.Series(_floats(cells), index=cells.index)
    return _checked_numbers(spec, numbers, blank, unit, flag)


def _checked_numbers(spec: Column, numbers: pd.Series, blank: pd.Series, unit: str | None, flag) -> pd.Series:
    """Numbers read from their cells, in canonical units, each refused one flagged and left missing (numpy over
    the column: a block of a large file costs a few array passes, not pandas' per-operation machinery)."""
    index = numbers.index
    numbers, blank = numbers.to_numpy(dtype=float), np.asarray(blank, dtype=bool)
    missing = np.isnan(numbers)
    flag(~blank & missing, lambda cell: f"'{cell}' is not a number{_unit_in_cell(spec, cell)}")
    unit = unit if unit is not None else spec.default_unit
    # 'inf' and '1e999' parse as numbers; no reading or register value is infinite, or near it.
    with np.errstate(over="ignore", invalid="ignore"):
        values = np.asarray(units.to_canonical(numbers, unit, spec.quantity), dtype=float) \
            if spec.quantity else numbers
        huge = ~np.isfinite(values) | (np.abs(values) > MAX_MAGNITUDE)
    flag(~blank & ~missing & huge, lambda cell: f"{cell} is not a finite number of a sensible size "
         f"(at most {MAX_MAGNITUDE:g} in canonical units)")
    values = np.where(huge, np.nan, values)

    def bound(value: float) -> str:
        """A bound in the unit the number was given in (a stroke typed in % is told its bounds in %)."""
        if spec.quantity and unit and not units.is_canonical(unit, spec.quantity):
            return f"{float(units.from_canonical([value], spec.quantity, unit)[0]):g} {units.shown(unit)}"
        return f"{value:g} {units.SHOWN_LABELS.get(spec.quantity or '', '')}".rstrip()

    with np.errstate(invalid="ignore"):
        if spec.positive:
            flag(values <= 0, lambda cell: f"{cell} must be above zero")
        if spec.min is not None:
            flag(values < spec.min - 1e-9, lambda cell: f"{cell} is below the lowest allowed value "
                 f"({bound(spec.min)})")
        if spec.max is not None:
            flag(values > spec.max + 1e-9, lambda cell: f"{cell} is above the highest allowed value "
                 f"({bound(spec.max)})")
        if spec.integer:
            flag(~np.isnan(values) & (values != np.round(values)), lambda cell: f"{cell} must be a whole number")
    return pd.Series(values, index=index)


_NUMBER_THEN_WORD = re.compile(r"^[-+]?(?:\d+[.,]?\d*|[.,]\d+)(?:[eE][-+]?\d+)?\s*(?P<unit>\D.*)$")


def _unit_in_cell(spec: Column, cell: str) -> str:
    """A hint for a number written with its unit ('1.5 days'): a file's units go in the column's header, where
    every row shares them (a form has its own unit choice); '' when the cell is no such pair."""
    match = _NUMBER_THEN_WORD.match(str(cell).strip()) if spec.quantity else None
    if match is None:
        return ""
    try:
        units.resolve(match.group("unit"), spec.quantity)
    except (units.UnitError, KeyError):
        return ""
    header = f"{spec.name} [{match.group('unit').strip()}]"
    return f": give the number alone (a file names its unit in the column's header: '{header}')"


def _floats(cells: pd.Series) -> np.ndarray:
    """Each cell as Python's float() reads it (NaN where it is no number).

    Arrow text goes through Arrow's cast, the whole column at once, which rounds a decimal to the nearest double as
    float() does (tests/test_fast_import.py checks both paths against each other). When the cast refuses a cell,
    plain decimals are cast and every other cell ('1_000', '0x10', a 400-digit integer) is read by float() itself."""
    values = np.full(len(cells), np.nan)
    rest = cells.notna().to_numpy(dtype=bool, copy=True)  # a blank stays NaN
    if is_arrow_text(cells) and len(cells):
        text = cells.array.__arrow_array__()
        try:
            return pc.cast(text, pa.float64()).to_numpy(zero_copy_only=False).astype(float)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            pass
        text = pc.fill_null(text, "")
        plain = pc.and_(pc.match_substring_regex(text, PLAIN_DECIMAL), pc.less_equal(pc.utf8_length(text), 24))
        try:
            picked = np.asarray(plain.to_numpy(zero_copy_only=False), dtype=bool)
            values[picked] = pc.cast(pc.filter(text, plain), pa.float64()).to_numpy(zero_copy_only=False)
            rest &= ~picked
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            pass
    # Cell by cell to float: a 400-digit integer becomes inf (refused below), never an OverflowError.
    values[rest] = [_to_float(c) for c in cells[rest]]
    return values


def _to_float(cell) -> float:
    if cell is None or cell is pd.NA:
        return np.nan
    try:
        return float(cell)
    except (TypeError, ValueError):
        return np.nan
    except OverflowError:
        return np.inf


def _parse_times(cells: pd.Series, blank: pd.Series, flag, zones: pd.Series | None = None) -> pd.Series:
    """ISO 8601 text only ('now' or '20260101' are not dates here), with an offset converted to UTC, without one
    read in the row's zone (fleet.io.localtime), to the microsecond the database keeps, between EARLIEST and
    LATEST."""
    iso = cells.str.fullmatch(ISO_TIME).fillna(False).astype(bool)
    flag(~blank & ~iso, lambda cell: f"'{cell}' is not a date (write YYYY-MM-DD or YYYY-MM-DD HH:MM)")
    # Years far outside the window are refused before pandas, whose times end in 1677 and 2262.
    far = iso & ~cells.str[:4].between(f"{EARLIEST.year - 1}", f"{LATEST.year + 1}").fillna(False).astype(bool)
    text = cells.where(iso & ~far)
    offset = text.str.contains(OFFSET).fillna(False).astype(bool)
    stamps = _to_datetime(text, offset, utc=True)
    wall = _to_datetime(text, ~offset, utc=False)
    unreadable = ~blank & iso & ~far & stamps.isna() & wall.isna()
    flag(unreadable, lambda cell: f"'{cell}' is not a date (write YYYY-MM-DD or YYYY-MM-DD HH:MM)")
    zones = pd.Series("UTC", index=cells.index) if zones is None else zones
    local, reasons = localize(wall, zones)
    for position, reason in reasons.items():
        flag.at(position, reason)
    stamps = stamps.where(offset, local).astype("datetime64[ns]").dt.floor("us")
    outside = far | (stamps < EARLIEST) | (stamps > LATEST)
    flag(outside, lambda cell: f"{cell} is outside the dates fleet keeps ({EARLIEST:%Y-%m-%d} to {LATEST:%Y-%m-%d})")
    return stamps.mask(outside)


def _to_datetime(text: pd.Series, rows: pd.Series, utc: bool) -> pd.Series:
    """The ISO 8601 times of ``rows`` (naive; UTC when ``utc``), NaT elsewhere; no parse when no row is asked."""
    if not rows.any():
        return pd.Series(pd.NaT, index=text.index, dtype="datetime64[ns]")
    stamps = pd.to_datetime(text.where(rows), errors="coerce", format="ISO8601", utc=utc)
    return stamps.dt.tz_localize(None) if utc else stamps


class _Flagger:
    """Files a Problem for every flagged cell of one column, and remembers which cells were flagged."""

    def __init__(self, spec: Column, cells: pd.Series):
        self.spec, self.cells, self.rows = spec, cells, row_numbers(cells.index)
        self.problems: list[Problem] = []
        self.positions: list[int] = []

    def __call__(self, mask, reason_for) -> None:
        for position in np.flatnonzero(np.asarray(mask)):
            self.at(int(position), reason_for(_shown(self.cells.iloc[position])))

    def at(self, position: int, reason: str) -> None:
        self.problems.append(Problem(int(self.rows[position]), self.spec.name, reason))
        self.positions.append(position)


def _plain_arrow_column(spec: Column, raw: pd.Series, unit: str | None,
                        conventions: RowConventions) -> tuple[pd.Series, list[Problem]] | None:
    """A column of a CSV's Arrow text whose every cell is already plain, parsed without the steps only a blank,
    padded, comma'd, NUL-bearing or odd cell needs; None when any cell needs them (the full path then words its
    problem). Plain means, for text, a cell neither empty nor padded, without a NUL and not too long; for a
    number, an empty cell or one Arrow's cast reads whole (it refuses a space, a comma, a NUL and any text: what
    ``_floats`` would cast after stripping); for a time, 'YYYY-MM-DD HH:MM' naming a real minute, in range, and one
    moment in the row's zone. Gives what the full path gives (tests/test_fast_import.py)."""
    text = raw.array.__arrow_array__()
    if len(text) == 0 or spec.type not in ("number", "datetime", "text"):
        return None
    if spec.type == "text":
        limit = TEXT_LENGTHS.get(spec.name, DEFAULT_TEXT_LENGTH)
        odd = pc.or_(pc.not_equal(pc.utf8_trim_whitespace(text), text), pc.equal(text, ""))
        odd = pc.or_(odd, pc.match_substring(text, "\x00"))
        if limit is not None:
            odd = pc.or_(odd, pc.greater(pc.utf8_length(text), limit))
        if pc.any(odd).as_py():
            return None
        return pd.Series(text.to_numpy(zero_copy_only=False), index=raw.index, dtype=object), []
    flag = _Flagger(spec, raw)
    if spec.type == "number":
        empty = pc.equal(text, "")  # an empty cell is blank (a padded one takes the full path)
        if pc.any(empty).as_py():
            text = pc.if_else(empty, pa.scalar(None, pa.string()), text)
        try:
            numbers = pc.cast(text, pa.float64()).to_numpy(zero_copy_only=False)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            return None
        blank = pd.Series(empty.to_numpy(zero_copy_only=False), index=raw.index)
        if spec.required:
            flag(blank, lambda _cell: "a value is required")
        return _checked_numbers(spec, pd.Series(numbers, index=raw.index), blank, unit, flag), flag.problems
    stamps = _plain_arrow_times(text, raw.index, conventions.zones)
    return None if stamps is None else (stamps, [])


# Byte positions of a plain time's digits and separators ('YYYY-MM-DD HH:MM', 16 ASCII bytes).
_TIME_DIGITS = np.array([0, 1, 2, 3, 5, 6, 8, 9, 11, 12, 14, 15])
_TIME_MARKS = {4: ord("-"), 7: ord("-"), 10: ord(" "), 13: ord(":")}


def plain_minutes(text) -> np.ndarray | None:
    """Arrow text whose every cell is 'YYYY-MM-DD HH:MM' naming a real minute, as datetime64[us] read from the
    cells' bytes (16 to a cell, so the column is a table of bytes); None when any cell is missing, written
    otherwise, or names no real minute (a 13th month, 30 February, 24:00): what matching YYYY-MM-DD HH:MM and
    reading it with strptime accepts and gives (tests/test_fast_import.py checks it against Python's
    ``datetime.strptime``); about a tenth of the time of Arrow's pattern, strptime and write-back."""
    if isinstance(text, pa.ChunkedArray):
        text = text.combine_chunks()
    count = len(text)
    if count == 0 or text.null_count or not pa.types.is_string(text.type):
        return None
    _validity, offsets, data = text.buffers()
    ends = np.frombuffer(offsets, dtype=np.int32, count=count + 1, offset=4 * text.offset)
    if ends[-1] - ends[0] != 16 * count or (np.diff(ends) != 16).any():
        return None
    cells = np.frombuffer(data, dtype=np.uint8, count=16 * count, offset=int(ends[0])).reshape(count, 16)
    for position, mark in _TIME_MARKS.items():
        if (cells[:, position] != mark).any():
            return None
    digits = cells[:, _TIME_DIGITS].astype(np.int64) - ord("0")
    if ((digits < 0) | (digits > 9)).any():
        return None
    year = digits[:, 0] * 1000 + digits[:, 1] * 100 + digits[:, 2] * 10 + digits[:, 3]
    month, day = digits[:, 4] * 10 + digits[:, 5], digits[:, 6] * 10 + digits[:, 7]
    hour, minute = digits[:, 8] * 10 + digits[:, 9], digits[:, 10] * 10 + digits[:, 11]
    if ((month < 1) | (month > 12) | (day < 1) | (hour > 23) | (minute > 59)).any():
        return None
    months = ((year - 1970) * 12 + month - 1).astype("datetime64[M]")
    first_day = months.astype("datetime64[D]")
    if (day > ((months + 1).astype("datetime64[D]") - first_day).astype(np.int64)).any():
        return None
    return (first_day.astype("datetime64[m]") + ((day - 1) * 1440 + hour * 60 + minute)).astype("datetime64[us]")


def _plain_arrow_times(text, index: pd.Index, zones: pd.Series | None) -> pd.Series | None:
    """Times written 'YYYY-MM-DD HH:MM' as naive UTC, or None when any cell is written otherwise, names no real
    minute (Arrow's strptime reads 30 February as 2 March, so each time must write back as its cell), falls outside
    EARLIEST..LATEST or in a gap or fold of its zone."""
    wall = plain_minutes(text)
    if wall is None:
        return None
    naive = pd.Series(wall.astype("datetime64[ns]"), index=index)
    local, reasons = localize(naive, pd.Series("UTC", index=index) if zones is None else zones)
    if reasons:
        return None
    stamps = local.astype("datetime64[ns]")
    if ((stamps < EARLIEST) | (stamps > LATEST) | stamps.isna()).any():
        return None
    return stamps


def _parse_column(spec: Column, raw: pd.Series, unit: str | None,
                  conventions: RowConventions | None = None) -> tuple[pd.Series, list[Problem]]:
    if spec.name in GRADE_COLUMNS:
        return _parse_grades(spec, raw, unit, conventions)
    return _parse_cells(spec, raw, unit, conventions)


def _parse_grades(spec: Column, raw: pd.Series, unit: str | None,
                  conventions: RowConventions | None) -> tuple[pd.Series, list[Problem]]:
    """An ISO VG grade as oil drums and data sheets write it ('ISO VG 46', 'VG46' or 46), and one of the grades of
    ISO 3448 only: a 47 is a slip, not a grade."""
    cells = _cells(raw).str.replace(_GRADE_PREFIX, r"\1", regex=True)
    values, problems = _parse_cells(spec, cells, unit, conventions)
    numbers = pd.to_numeric(values, errors="coerce")
    odd = numbers.notna() & ~numbers.isin(ISO_VG_GRADES)
    grades = ", ".join(str(g) for g in ISO_VG_GRADES)
    problems += [Problem(int(row), spec.name, f"{number:g} is not an ISO VG grade (ISO 3448: {grades})")
                 for row, number in zip(row_numbers(values.index[odd]), numbers[odd], strict=True)]
    return values.mask(odd, None), problems


def _parse_cells(spec: Column, raw: pd.Series, unit: str | None,
                 conventions: RowConventions | None = None) -> tuple[pd.Series, list[Problem]]:
    if is_arrow_text(raw):
        plain = _plain_arrow_column(spec, raw, unit, (conventions or RowConventions()).aligned(raw.index))
        if plain is not None:
            return plain
    cells = _cells(raw)
    blank = cells.isna()
    flag = _Flagger(spec, cells)
    problems = flag.problems
    conventions = (conventions or RowConventions()).aligned(cells.index)

    if spec.required:
        flag(blank, lambda _cell: "a value is required")
    # A NUL character is no part of any value (PostgreSQL refuses it in text, even in a query), and text that
    # cannot be written as UTF-8 (an unpaired surrogate from a broken client) cannot be stored or shown.
    nul = cells.str.contains("\x00", regex=False).fillna(False).astype(bool)
    flag(nul, lambda _cell: "contains a NUL character (0x00)")
    if is_arrow_text(cells):  # Arrow text is valid UTF-8 by construction
        broken = pd.Series(False, index=cells.index)
    else:
        broken = cells.map(_not_utf8, na_action="ignore").fillna(False).astype(bool) & ~nul
    flag(broken, lambda _cell: "contains characters that cannot be stored (not valid Unicode text)")
    cells, blank = cells.mask(nul | broken), blank | nul | broken

    if spec.type == "number":
        return _parse_numbers(spec, cells, blank, unit, flag, conventions.decimal_comma), problems

    if spec.type == "datetime":
        return _parse_times(cells, blank, flag, conventions.zones), problems

    if spec.type == "bool":
        lowered = cells.str.lower()
        known = lowered.isin(TRUE_WORDS | FALSE_WORDS) | blank
        flag(~known, lambda cell: f"'{cell}' is not yes or no")
        return lowered.isin(TRUE_WORDS).where(~blank, None).astype(object), problems

    if spec.type == "kind":
        keys = cells.map(lambda cell: normalise_kind(cell) if isinstance(cell, str) else None)
        flag(~blank & keys.isna(), lambda cell: f"'{cell}' is not a pump kind ({', '.join(PUMP_KINDS)})")
        return keys.astype(object), problems

    vocabularies = {"event_kind": EVENT_KINDS, "failure_mode": FAILURE_MODES, "source": READING_SOURCES}
    if spec.type in vocabularies:
        allowed = tuple(vocabularies[spec.type])
        keys = cells.str.lower().str.replace(" ", "_").str.replace("-", "_")
        flag(~blank & ~keys.isin(allowed), lambda cell: f"'{cell}' is not one of {', '.join(allowed)}")
        return keys.where(~blank, None).astype(object), problems

    if spec.type == "iso4406":
        codes = []
        for position, cell in enumerate(cells):
            if pd.isna(cell):
                codes.append(None)
                continue
            try:
                codes.append(parse_code(cell))
            except ValueError as exc:
                flag.at(position, str(exc))
                codes.append(None)
        return pd.Series(codes, index=cells.index, dtype=object), problems

    limit = TEXT_LENGTHS.get(spec.name, DEFAULT_TEXT_LENGTH)
    if limit is not None:
        flag(~blank & (cells.str.len() > limit), lambda cell: f"is {len(cell)} characters long; at most {limit} fit")
    return cells.astype(object).where(~blank, None), problems  # text
