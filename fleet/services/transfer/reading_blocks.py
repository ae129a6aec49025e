"""The readings import in blocks of rows, each parsed and checked, then stored. On PostgreSQL a helper thread
prepares the next block while the session's thread sends the one before it: psycopg lets go of the GIL while it
sends, and Arrow's CSV writer while it writes, so the two run side by side. On SQLite the session's thread prepares
each block itself: sqlite3 takes the GIL back to bind every row, and the parsing's pandas steps and Python values
hold it, so a helper thread only took turns with the insert, and under load made the import slower (README,
"Readings import against its floor").

Whole or nothing, as any import: every problem of every block is reported at once, and a refusal found in a later
block undoes the earlier blocks' rows (they are written under a savepoint), so nothing is kept. The checks find
what one pass over the whole table finds: a pump and time is a duplicate of any earlier block's, "already stored"
means stored before the import began (a reading id no higher than the largest then), and the hour-meter doubts
are asked once, over the whole table, after the last block.
"""

from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import datetime

import numpy as np
import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from fleet.db.models import Pump, Reading
from fleet.io import rules
from fleet.io.files import StreamedCsv
from fleet.io.meter import meter_doubts
from fleet.io.parse import Headers, Problem, RowConventions, is_arrow_text, parse_rows, read_headers
from fleet.services.sitelocal import of_site, pump_sites, queryable
from fleet.services.transfer.bulk import BulkInsert
from fleet.timeutil import utcnow

# Rows per block: big enough that each column operation's fixed cost is small, small enough that the blocks held at
# once (one parsing, one storing) stay a few MB. The first blocks are smaller, so the first insert starts soon.
BLOCK_ROWS = 65_536
FIRST_BLOCK_ROWS = 8_192
# Serials per query (SQLite allows 32,766 bound values in a statement).
SERIALS_PER_QUERY = 10_000
READING_COLUMNS = ["pump_id", "taken_at", "hours", "pressure_bar", "speed_rpm", "flow_lpm", "drain_lpm", "temp_c",
                   "stroke", "taken_by", "note", "source", "created_at"]


@dataclass
class Outcome:
    """What an import of readings found and did."""

    rows: int
    ignored_columns: list[str]
    created: int = 0
    skipped: int = 0  # rows equal to a reading stored before (skip_stored_same)
    pump_ids: set[int] = field(default_factory=set)
    doubts: list[dict] = field(default_factory=list)
    problems: list[Problem] = field(default_factory=list)  # empty when the rows were stored


def import_readings(session: Session, table: pd.DataFrame | StreamedCsv, now: datetime, source: str,
                    taken_by: str | None, store: bool = True, skip_stored_same: bool = False) -> Outcome:
    """Check the readings of ``table`` (a table of cells, or a CSV streamed in blocks) and, when ``store`` and no row
    has a problem, insert them all in the caller's transaction; on a problem nothing stays written and
    ``problems`` names every one. A streamed CSV that pyarrow's reader refuses further on raises StreamBroken,
    with every block written before undone.

    A row whose pump and time a stored reading has is refused; with ``skip_stored_same`` (a file imported again,
    or one that repeats rows already imported), a row whose measured values and note equal the stored reading's
    is the same reading: it is counted in ``skipped`` and not written again. A row with other values is refused
    either way, naming the first value that differs: a stored reading is changed on its page, with a reason."""
    streamed = isinstance(table, StreamedCsv)
    headers = read_headers("readings", table.names if streamed else table.columns)
    pumps = _Pumps(session)
    writer = BulkInsert(session, Reading, READING_COLUMNS) if store else None
    many = streamed or len(table) > min(FIRST_BLOCK_ROWS, BLOCK_ROWS)
    # Rows this import writes must not count as stored before it: only ids up to the largest now are.
    before_id = session.scalar(select(func.coalesce(func.max(Reading.id), 0))) if store else None
    work = _Blocks(headers, pumps, now, source, taken_by, writer)
    work.skip_stored_same = skip_stored_same
    outcome = Outcome(0, headers.ignored)
    raw = table.blocks(_sizes()) if streamed else _slices(table)
    try:
        if many and store:
            with session.begin_nested() as savepoint:
                _run(session, work, raw, before_id, outcome)
                if outcome.problems:
                    savepoint.rollback()
        else:
            _run(session, work, raw, before_id, outcome)
    finally:
        if streamed:
            table.close()
    outcome.rows = work.rows
    return outcome


def _sizes() -> Iterator[int]:
    """Rows of each block: FIRST_BLOCK_ROWS, then twice as many each time up to BLOCK_ROWS."""
    size = min(FIRST_BLOCK_ROWS, BLOCK_ROWS)
    while True:
        yield size
        size = min(2 * size, BLOCK_ROWS)


def _slices(table: pd.DataFrame) -> Iterator[pd.DataFrame]:
    """A table's rows in blocks of ``_sizes`` (one empty block for a table without rows)."""
    first, sizes = 0, _sizes()
    while True:
        size = next(sizes)
        yield table.iloc[first:first + size]
        first += size
        if first >= len(table):
            return


def _run(session: Session, work: "_Blocks", raw: Iterator[pd.DataFrame], before_id: int | None,
         outcome: Outcome) -> None:
    stored_clash: list[Problem] = []
    new_rows: list[pd.DataFrame] = []
    beside = work.writer is not None and work.writer.mode == "postgresql"
    blocks = _in_turn(work, raw, beside)
    try:
        for block in blocks:
            if work.cells_wrong:
                continue  # only the cells are reported now: nothing more to check or store
            clash, same = _stored(session, block, before_id, work.skip_stored_same)
            stored_clash += clash
            if same is not None:  # rows equal to stored readings: counted, not written again
                _leave_out(work, block, same)
                outcome.skipped += int(same.sum())
            if stored_clash or work.file_problems:
                work.refused = True  # stop converting rows that will not be stored
                continue
            if block.prepared is not None:
                work.writer.write(block.prepared)
                outcome.created += block.prepared.count
                outcome.pump_ids |= block.prepared.pump_ids
            new_rows.append(block.meter)
    finally:
        blocks.close()  # waits for the block a helper thread may still be preparing
    if work.cells_wrong:
        outcome.problems = work.headers.problems + work.cell_problems + work.unknown
    elif work.file_problems or stored_clash:
        outcome.problems = work.file_problems + stored_clash
    if outcome.problems:
        outcome.created, outcome.skipped, outcome.pump_ids = 0, 0, set()
        return
    if outcome.created:
        outcome.doubts = _meter_doubts(session, pd.concat(new_rows) if len(new_rows) > 1 else new_rows[0],
                                       before_id)


def _in_turn(work: "_Blocks", raw: Iterator[pd.DataFrame], beside: bool):
    """Each block prepared, in order, its serials asked of the register first (in the session's thread): when
    ``beside``, a helper thread prepares the next block while the caller stores the one it was given."""
    try:
        if not beside:
            for rows in raw:
                yield work.prepare(rows, work.pumps.look_up(_stripped(rows, work.headers)))
            return
        with ThreadPoolExecutor(max_workers=1, thread_name_prefix="fleet-import") as helper:
            coming = None
            for rows in raw:
                serials = work.pumps.look_up(_stripped(rows, work.headers))
                queued = helper.submit(work.prepare, rows, serials)  # runs once the block before is prepared
                if coming is not None:
                    yield coming.result()
                coming = queued
            if coming is not None:
                yield coming.result()
    finally:
        raw.close()


@dataclass
class _Block:
    ids: np.ndarray | None = None  # pump id per row (NaN: unknown)
    taken_at: pd.Series | None = None
    serials: pd.Series | None = None
    prepared: object = None  # the rows as the driver takes them (None: not to be stored)
    meter: pd.DataFrame | None = None  # pump_id, taken_at, hours of the block's rows
    frame: pd.DataFrame | None = None  # the rows as stored (READING_COLUMNS the file gives), prepared from
    same: dict | None = None  # the columns one value in every row (BulkInsert.prepare's ``same``)


class _Pumps:
    """The register's answer for the table's serials, each asked once: pump id and site conventions."""

    def __init__(self, session: Session):
        self.session = session
        self.ids: dict[str, int] = {}
        self.conventions: dict = {}

    def look_up(self, cells: pd.Series | None) -> pd.Series | None:
        """Ask the register about the serials among ``cells`` (a block's stripped pump cells) not asked about yet,
        in the session's thread (a helper thread only reads the answers, of blocks it is given after they were
        asked); gives the cells back."""
        if cells is None:
            return None
        serials = [s for s in pd.unique(cells.dropna()) if s not in self.conventions and queryable(s)]
        session = self.session
        for start in range(0, len(serials), SERIALS_PER_QUERY):
            part = serials[start:start + SERIALS_PER_QUERY]
            self.ids.update(session.execute(select(Pump.serial, Pump.id).where(Pump.serial.in_(part))).all())
        sites = pump_sites(session, serials)
        self.conventions.update({serial: of_site(sites.get(serial)) for serial in serials})
        return cells

    def row_conventions(self, cells: pd.Series) -> RowConventions:
        """Each row's zone and decimal comma by its pump's site (as fleet.services.sitelocal.row_conventions)."""
        codes, serials = pd.factorize(cells)
        found = [self.conventions.get(serial) or of_site(None) for serial in serials] + [of_site(None)]
        zones = np.array([c.time_zone for c in found], dtype=object)[codes]
        comma = np.array([c.decimal_comma for c in found], dtype=bool)[codes]
        return RowConventions(pd.Series(zones, index=cells.index, dtype=object),
                              pd.Series(comma, index=cells.index, dtype=bool))


class _Blocks:
    """Prepares blocks one after another (in a helper thread on PostgreSQL), keeping what the file's later blocks
    are checked against: the problems so far and every earlier (pump, time)."""

    def __init__(self, headers: Headers, pumps: _Pumps, now: datetime, source: str, taken_by: str | None,
                 writer: BulkInsert | None):
        self.headers, self.pumps, self.now = headers, pumps, now
        self.rows = 0  # rows of the blocks prepared so far: the next block's first row is the file's row rows + 2
        self.source, self.taken_by, self.writer = source, taken_by, writer
        self.created_at = pd.Timestamp(utcnow())
        self.cell_problems: list[Problem] = []  # cells and the rules between them (nothing else is then reported)
        self.unknown: list[Problem] = []  # serials the register does not hold
        self.file_problems: list[Problem] = []  # unknown pumps and repeated (pump, time) when the cells are right
        self.refused = bool(headers.problems)
        self.skip_stored_same = False  # rows equal to stored readings skipped, not refused (import_readings)
        self.serial_codes: dict[str, int] = {}
        self.seen_codes: list[np.ndarray] = []  # the serial code and time of every earlier block's rows
        self.seen_micros: list[np.ndarray] = []

    @property
    def cells_wrong(self) -> bool:
        return bool(self.headers.problems or self.cell_problems)

    def prepare(self, rows: pd.DataFrame, serials: pd.Series | None) -> _Block:
        """The block ``rows`` (the next after those prepared so far) parsed and checked, with ``serials`` its
        stripped pump cells, already asked of the register."""
        first = self.rows
        stop = self.rows = first + len(rows)
        has_pump = "pump" in self.headers.found
        conventions = None
        if has_pump:
            cells = serials.set_axis(pd.RangeIndex(first, stop))
            conventions = self.pumps.row_conventions(cells)
        parsed, problems = parse_rows(self.headers, rows, conventions, first)
        problems += rules.table_rules("readings", parsed.data, self.now)
        block = _Block()
        serial_codes = None
        if has_pump:
            serial_codes = pd.factorize(parsed.data["pump"])  # each row's serial as a code, shared by the checks
            block.ids = self._ids(parsed.data["pump"], serial_codes)
        self.cell_problems += problems
        if self.cells_wrong:
            self.refused = True
            return block
        data = parsed.data
        block.taken_at, block.serials = data["taken_at"], data["pump"]
        self._repeats(data, serial_codes)
        if self.file_problems:
            self.refused = True
        given = {"flow_lpm": "outlet_flow", "drain_lpm": "case_drain_flow", "stroke": "stroke", "note": "note",
                 "taken_by": "taken_by", "source": "source"}
        frame = pd.DataFrame({
            "pump_id": np.nan_to_num(block.ids).astype(np.int64),
            "taken_at": data["taken_at"],
            "hours": data["hours"],
            "pressure_bar": data["outlet_pressure"],
            "speed_rpm": data["speed"],
            "temp_c": data["oil_temp"],
        } | {name: data[field] for name, field in given.items() if field in data}, index=data.index)
        # A column the file lacks holds one value in every row: the import's own for taken_by and source.
        defaults = {"taken_by": self.taken_by, "source": self.source}
        for name in ("taken_by", "source"):
            if name in frame:
                frame[name] = frame[name].where(frame[name].notna(), defaults[name])
        same = {name: defaults.get(name) for name in given if name not in frame} | {"created_at": self.created_at}
        block.meter = frame[["pump_id", "taken_at", "hours"]]
        block.frame, block.same = frame, same
        if self.writer is not None and not self.refused:
            block.prepared = self.writer.prepare(frame, same)
        return block

    def _ids(self, serials: pd.Series, factorized: tuple) -> np.ndarray:
        """Pump ids (NaN for a serial the register lacks, which becomes a problem; a blank cell is one already);
        ``factorized`` is ``pd.factorize(serials)``."""
        codes, unique = factorized
        found = np.array([self.pumps.ids.get(serial, np.nan) for serial in unique] + [np.nan], dtype=float)
        ids = found[codes]
        unknown = np.isnan(ids) & serials.notna().to_numpy()
        for row, serial in zip(serials.index[unknown] + 2, serials[unknown], strict=True):
            problem = Problem(int(row), "pump", f"no pump '{serial}' in the register (import it with the pumps first)")
            self.unknown.append(problem)
            self.file_problems.append(problem)
        return ids

    def _repeats(self, data: pd.DataFrame, factorized: tuple) -> None:
        """Rows whose pump and time appear earlier in the file, in this block or an earlier one; ``factorized``
        is ``pd.factorize(data["pump"])``."""
        codes, unique = factorized
        known = np.array([self.serial_codes.setdefault(serial, len(self.serial_codes)) for serial in unique],
                         dtype=np.int64)
        serial_codes = known[codes]
        micros = data["taken_at"].to_numpy(dtype="datetime64[us]").view(np.int64)
        # Within the block: sorted by (serial, time), stably, a row equal to the one before it is a later repeat.
        order = np.lexsort((micros, serial_codes))
        same = (np.diff(serial_codes[order]) == 0) & (np.diff(micros[order]) == 0)
        repeated = np.zeros(len(data), dtype=bool)
        repeated[order[1:][same]] = True
        if self.seen_codes:
            # Only earlier rows of this block's pumps can repeat one of its rows (a file sorted by pump shares few).
            self.seen_codes = [np.concatenate(self.seen_codes)]
            self.seen_micros = [np.concatenate(self.seen_micros)]
            shared = np.isin(self.seen_codes[0], np.unique(serial_codes))
            if shared.any():
                # One complex number per (serial, time): both parts exact, as a serial's code and a time's
                # microseconds since 1970 (below 2^53 until the year 2255) are whole numbers a double holds exactly.
                earlier = self.seen_codes[0][shared] + 1j * self.seen_micros[0][shared].astype(float)
                repeated |= pd.Index(serial_codes + 1j * micros.astype(float)).isin(earlier)
        for row in data.index[repeated] + 2:
            self.file_problems.append(Problem(int(row), "taken_at", "the same pump and time appears earlier in the "
                                              "file"))
        self.seen_codes.append(serial_codes)
        self.seen_micros.append(micros)


# The values that make a row the same reading as a stored one (fleet units), with how a problem names them.
SAME_READING = {"hours": ("hours", "h"), "pressure_bar": ("outlet_pressure", "bar"), "speed_rpm": ("speed", "rpm"),
                "flow_lpm": ("outlet_flow", "L/min"), "drain_lpm": ("case_drain_flow", "L/min"),
                "temp_c": ("oil_temp", "degC"), "stroke": ("stroke", ""), "note": ("note", "")}


def _stored(session: Session, block: _Block, before_id: int | None,
            skip_same: bool = False) -> tuple[list[Problem], np.ndarray | None]:
    """Rows of the block whose pump and time a reading stored before the import already has, as problems; with
    ``skip_same``, the rows whose values equal that reading's are left out of the problems and marked instead
    (the mask over the block's rows; None when there are none)."""
    if block.taken_at is None:
        return [], None
    known = ~np.isnan(block.ids)
    if not known.any():
        return [], None
    pump_ids = block.ids[known].astype(np.int64)
    stamps, serials = block.taken_at[known], block.serials[known]
    compared = [name for name in SAME_READING if skip_same and block.frame is not None and name in block.frame]
    query = select(Reading.pump_id, Reading.taken_at, *(getattr(Reading, name) for name in compared)).where(
        Reading.pump_id.in_([int(x) for x in np.unique(pump_ids)]),
        Reading.taken_at >= stamps.min().to_pydatetime(), Reading.taken_at <= stamps.max().to_pydatetime())
    if before_id is not None:
        query = query.where(Reading.id <= before_id)
    rows = session.execute(query).all()
    if not rows:
        return [], None
    stored = pd.MultiIndex.from_arrays([np.array([r[0] for r in rows], dtype=np.int64),
                                        pd.to_datetime(pd.Series([r[1] for r in rows], dtype=object))
                                        .astype("datetime64[ns]")])
    keys = pd.MultiIndex.from_arrays([pump_ids, stamps.astype("datetime64[ns]").to_numpy()])
    clash = keys.isin(stored)
    if not clash.any():
        return [], None
    at = stamps.index[clash]
    differs: list[str | None] = [""] * len(at)  # "": refused as before (not compared)
    if compared:
        values = pd.DataFrame([r[2:] for r in rows], columns=compared, index=stored)
        differs = _first_difference(block.frame.loc[at, compared], values.loc[keys[clash]])
    same = np.zeros(len(block.taken_at), dtype=bool)
    problems = []
    for index, serial, stamp, differ in zip(at, serials[clash], stamps[clash], differs, strict=True):
        if differ is None:
            same[block.taken_at.index.get_loc(index)] = True
            continue
        problems.append(Problem(int(index) + 2, "taken_at", f"a reading of pump '{serial}' at {stamp:%Y-%m-%d %H:%M} "
                                f"is already stored{differ}"))
    return problems, same if same.any() else None


def _first_difference(given: pd.DataFrame, stored: pd.DataFrame) -> list[str | None]:
    """Per row, None when each value of ``given`` equals the stored one (numbers to 1e-9 of their size, as a file
    exported in other units and imported again brings them back; both missing is equal), else what names the first
    that differs."""
    out = []
    for here, there in zip(given.itertuples(index=False), stored.itertuples(index=False), strict=True):
        for name, a, b in zip(given.columns, here, there, strict=True):
            if _equal(a, b):
                continue
            field, unit = SAME_READING[name]
            shown = (f"{_shown(a)} {unit}".strip(), f"{_shown(b)} {unit}".strip())
            out.append(f", with other values ({field}: {shown[0]} here, {shown[1]} stored); a stored reading is "
                       "changed on its page, with a reason")
            break
        else:
            out.append(None)
    return out


def _equal(a, b) -> bool:
    missing_a, missing_b = a is None or (isinstance(a, float) and np.isnan(a)), b is None or (
        isinstance(b, float) and np.isnan(b))
    if missing_a or missing_b:
        return missing_a and missing_b
    if isinstance(a, str) or isinstance(b, str):
        return str(a) == str(b)
    return bool(np.isclose(float(a), float(b), rtol=1e-9, atol=0.0))


def _shown(value) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return "none"
    return f"{value:g}" if isinstance(value, float) else repr(str(value))


def _leave_out(work: "_Blocks", block: _Block, same: np.ndarray) -> None:
    """The block without the rows ``same`` marks: neither written nor asked about the hour meter."""
    keep = ~same
    block.meter = block.meter[keep]
    if block.prepared is not None:
        block.prepared = work.writer.prepare(block.frame[keep], block.same) if keep.any() else None


def _meter_doubts(session: Session, frame: pd.DataFrame, before_id: int | None) -> list[dict]:
    """The hour-meter doubts of new readings against the reading before each, stored or in the same table."""
    pump_ids = [int(x) for x in pd.unique(frame["pump_id"])]
    query = select(Reading.pump_id, Reading.taken_at, Reading.hours).where(
        Reading.pump_id.in_(pump_ids), Reading.taken_at <= frame["taken_at"].max().to_pydatetime())
    if before_id is not None:
        query = query.where(Reading.id <= before_id)
    stored = pd.DataFrame(session.execute(query).all(), columns=["pump_id", "taken_at", "hours"])
    found = sorted(meter_doubts(frame, stored), key=lambda pair: pair[0])
    return [{"row": int(index) + 2, "field": "hours", "code": doubt.code, "message": doubt.message}
            for index, doubt in found]


def _stripped(table: pd.DataFrame, headers: Headers) -> pd.Series | None:
    """The pump cells stripped, as the parser strips them (Arrow text stays Arrow)."""
    if "pump" not in headers.found:
        return None
    column = table.iloc[:, headers.positions["pump"]]
    return (column if is_arrow_text(column) else column.astype("string")).str.strip()

