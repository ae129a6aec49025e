"""Many rows into one table at once, inside the caller's unit of work: the readings and events of an import.

A ``BulkInsert`` works in two steps, so an import can prepare one block of rows while the database stores the
block before it: ``prepare`` turns a frame into what the driver takes, touching no connection (any thread may run
it), and ``write`` sends it, in the session's own thread. On SQLite the rows are tuples for sqlite3's executemany;
on PostgreSQL they are CSV text written by Arrow's CSV writer and streamed through COPY (psycopg 3's
``cursor.copy``), the server's own bulk path; any other database takes SQLAlchemy Core's executemany insert.
Each column is converted once, over the whole column: times as the text each database keeps (SQLite) or reads
(COPY), by Arrow's cast, never row by row. On SQLite a column holding one value in every row of a block is not bound
row by row: its value is one parameter of each statement, or the literal NULL when it is missing (sqlite3 binds each
None through its adapter look-up, about 0.4 us a value, more than SQLite takes to store it).
"""

import io
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as arrow_csv
from sqlalchemy import insert
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from fleet.db import changes

# Every value quoted and a missing one left empty: COPY's CSV format then reads an empty string as itself, a missing
# value as NULL, and no cell (not even a note of '\.') as the end of the data.
_CSV_OPTIONS = arrow_csv.WriteOptions(include_header=False, quoting_style="all_valid")
_DRIVERS = {"sqlite": "pysqlite", "postgresql": "psycopg"}
# Rows per INSERT statement on SQLite (a VALUES list of that many rows): SQLite then runs its statement once per 50
# rows rather than once per row, and sqlite3 steps it once (README, "Readings import against its floor").
SQLITE_ROWS_PER_STATEMENT = 50
# How a column's values reach an INSERT on SQLite: each row's own parameter, one parameter that every row of the
# statement shares (a column holding one value in every row), or the literal NULL (a column missing in every row).
ROW, ONCE, NULL = "row", "once", "null"


@dataclass
class Prepared:
    """One block's rows as the driver takes them."""

    rows: object  # SqliteRows (sqlite3), CSV bytes (COPY) or dicts (Core)
    count: int
    pump_ids: set[int]


@dataclass
class SqliteRows:
    """One block's rows for sqlite3: the parameter lists of each INSERT of ``per`` rows (``grouped``) and of each
    of the last few rows, one to a statement (``rest``); ``shape`` is each column's way into the statements (ROW,
    ONCE, NULL; ``BulkInsert.insert``): a list holds its rows' own values, row after row, then the ONCE columns'."""

    shape: tuple[str, ...]
    grouped: list[list]
    rest: list[list]


class BulkInsert:
    """Inserts frames (columns named as ``model``'s, ``pump_id`` among them) into ``model``'s table."""

    def __init__(self, session: Session, model, columns: list[str]):
        self.session, self.model, self.columns = session, model, list(columns)
        dialect = session.connection().dialect
        self.mode = dialect.name if _DRIVERS.get(dialect.name) == dialect.driver else "core"
        self._same: dict[str, tuple] = {}  # column -> (a value every row holds, sqlite3's value for it)
        self._statements: dict[tuple, tuple[str, str]] = {}  # (shape, per) -> INSERTs of `per` rows and of one row
        self._names = ", ".join(self.columns)
        if self.mode == "sqlite":
            self.per = SQLITE_ROWS_PER_STATEMENT
            self.statement = self.insert((ROW,) * len(self.columns), 1)
        else:
            self.statement = f"COPY {model.__tablename__} ({self._names}) FROM STDIN (FORMAT csv)"

    def insert(self, shape: tuple[str, ...], rows: int) -> str:
        """SQLite's INSERT of ``rows`` rows whose columns come in as ``shape`` says (``insert_statement``)."""
        return insert_statement(self.model.__tablename__, self.columns, shape, rows)

    def prepare(self, frame: pd.DataFrame, same: dict | None = None) -> Prepared:
        """The frame's rows as the driver takes them, with ``same`` naming columns that hold one value in every
        row (a file without notes, the import's time); no connection is touched."""
        same = same or {}
        pump_ids = {int(p) for p in pd.unique(frame["pump_id"])}
        if self.mode == "sqlite":
            return Prepared(self._sqlite_groups(frame, same), len(frame), pump_ids)
        frame = frame.assign(**{name: [value] * len(frame) for name, value in same.items()})[self.columns]
        if self.mode == "postgresql":
            rows = csv_bytes(frame)
        else:
            rows = _records(frame)
        return Prepared(rows, len(frame), pump_ids)

    def write(self, prepared: Prepared) -> None:
        """Send prepared rows, in the session's thread, inside its transaction."""
        if prepared.count == 0:
            return
        changes.note(self.session, self.model.__tablename__, "pump_id", prepared.pump_ids)
        if self.mode == "core":
            self.session.execute(insert(self.model), prepared.rows)
            return
        connection = self.session.connection()
        dbapi_error = connection.dialect.loaded_dbapi.Error
        cursor = connection.connection.cursor()
        try:
            if self.mode == "sqlite":
                self._sqlite_rows(cursor, prepared)
            else:
                encoding = cursor.connection.info.encoding
                data = prepared.rows if encoding == "utf-8" else prepared.rows.decode("utf-8").encode(encoding)
                with cursor.copy(self.statement) as copy:
                    copy.write(data)
        except dbapi_error as error:
            # As SQLAlchemy would raise it from its own execute: the write unit retries a lock or a key stored twice
            # at once by its type (fleet.db.transaction), and a driver's bare error would pass that by.
            raise DBAPIError.instance(self.statement, None, error, dbapi_error) from error
        finally:
            cursor.close()


    def _sqlite_groups(self, frame: pd.DataFrame, same: dict) -> SqliteRows:
        """The rows as sqlite3 binds them, in their order: the parameters of each INSERT of ``self.per`` rows, and
        of the last few rows one to a statement. A column of ``same`` is bound once a statement (or written NULL,
        when missing), as is a column missing in every row of the frame (NULL); the others row by row. The values
        are made once, column by column, straight into tables of Python objects laid out as the statements take
        them (numpy makes a float64 column's Python floats and an int64 column's ints in C, as ``tolist`` does),
        which are then cut into parameter lists; the same values as ``python_values`` gives each column
        (tests/test_fast_import.py)."""
        shape, own, once = [], [], []
        for name in self.columns:
            if name in same:
                value = self._same_value(name, same[name])
                shape.append(NULL if _missing(value) else ONCE)
                if shape[-1] == ONCE:
                    once.append(value)
            elif frame[name].isna().all():
                shape.append(NULL)
            else:
                shape.append(ROW)
                own.append(name)
        count, bound, per = len(frame), len(own), self.per
        whole = count // per * per
        grouped = np.empty((whole // per, per * bound + len(once)), dtype=object)
        rest = np.empty((count - whole, bound + len(once)), dtype=object)
        for position, name in enumerate(own):
            values = _column_values(frame[name])
            # Row r of a statement holds this column at r * bound + position of its parameter list (a strided view).
            grouped[:, position:per * bound:bound] = values[:whole].reshape(-1, per)
            rest[:, position] = values[whole:]
        for position, value in enumerate(once):
            grouped[:, per * bound + position] = value
            rest[:, bound + position] = value
        return SqliteRows(tuple(shape), grouped.tolist(), rest.tolist())

    def _same_value(self, name: str, value) -> object:
        """sqlite3's value for a column holding ``value`` in every row, made once for all of a writer's blocks."""
        made = self._same.get(name)
        if made is None or made[0] is not value:
            made = self._same[name] = (value, python_values(pd.Series([value]))[0])
        return made[1]

    def _sqlite_rows(self, cursor, prepared: Prepared) -> None:
        """The rows by ``self.per`` (SQLITE_ROWS_PER_STATEMENT) to a statement, in their order (so their ids are as
        one row to a statement gives them), the last few one to a statement."""
        rows: SqliteRows = prepared.rows
        statements = self._statements.get((rows.shape, self.per))
        if statements is None:
            statements = (self.insert(rows.shape, self.per), self.insert(rows.shape, 1))
            self._statements[rows.shape, self.per] = statements
        if rows.grouped:
            cursor.executemany(statements[0], rows.grouped)
        if rows.rest:
            cursor.executemany(statements[1], rows.rest)


def _missing(value) -> bool:
    """A value sqlite3 would bind as NULL: None, or a float NaN."""
    return value is None or (isinstance(value, float) and value != value)


def insert_statement(table: str, columns: list[str], shape: tuple[str, ...], rows: int) -> str:
    """SQLite's INSERT of ``rows`` rows into ``columns`` of ``table``, each column coming in as ``shape`` says: the
    k-th ROW column of row r is parameter r * (ROW columns) + k, the j-th ONCE column parameter rows * (ROW columns)
    + j of every row, a NULL column the literal NULL (numbered parameters, so a shared value is bound once a
    statement)."""
    bound = shape.count(ROW)
    tuples = []
    for row in range(rows):
        own, shared, cells = row * bound, rows * bound, []
        for kind in shape:
            if kind == ROW:
                own += 1
                cells.append(f"?{own}")
            elif kind == ONCE:
                shared += 1
                cells.append(f"?{shared}")
            else:
                cells.append("NULL")
        tuples.append(f"({', '.join(cells)})")
    return f"INSERT INTO {table} ({', '.join(columns)}) VALUES {', '.join(tuples)}"


def insert_frame(session: Session, model, frame: pd.DataFrame) -> None:
    """Insert the rows of ``frame`` (columns named as the table's, ``pump_id`` among them) in one statement."""
    if len(frame):
        writer = BulkInsert(session, model, list(frame.columns))
        writer.write(writer.prepare(frame))


def python_values(series: pd.Series) -> list:
    """A column as sqlite3's values: floats (NaN, which sqlite3 binds as NULL), ints, text (NaN when missing), or
    time text (None when missing)."""
    return _column_values(series).tolist()


def _column_values(series: pd.Series) -> np.ndarray:
    """A column as an array whose items (``tolist``, or assigned into an object array) are sqlite3's values:
    float64 (Python floats; NaN, which sqlite3 binds as NULL), int64 (ints), or objects (time text or None, text
    or a float NaN for a missing text: sqlite3 binds it as NULL, as it binds None, without None's adapter look-up,
    about 0.4 us a value)."""
    if pd.api.types.is_datetime64_any_dtype(series):
        values = series.to_numpy(dtype="datetime64[us]")
        if len(values) and (values == values[0]).all():
            return np.full(len(values), time_texts(values[:1])[0], dtype=object)  # one moment (created_at)
        return _time_text_array(values)
    if pd.api.types.is_float_dtype(series):
        return series.to_numpy(dtype=float)
    if pd.api.types.is_integer_dtype(series):
        return series.to_numpy(dtype=np.int64)
    values = series.astype(object)
    return values.where(values.notna(), np.nan).to_numpy(dtype=object)


def time_texts(values: np.ndarray) -> list[str | None]:
    """Times as 'YYYY-MM-DD HH:MM:SS.ffffff', as SQLAlchemy stores a DateTime in SQLite (None for NaT): Arrow's
    cast of a microsecond timestamp writes exactly that (tests/test_fast_import.py checks it against strftime)."""
    return _time_text_array(values).tolist()


def _time_text_array(values: np.ndarray) -> np.ndarray:
    stamps = pa.array(np.asarray(values, dtype="datetime64[us]"), type=pa.timestamp("us"), from_pandas=True)
    # to_numpy makes the str objects in C (to_pylist makes an Arrow scalar per value first).
    return pc.cast(stamps, pa.string()).to_numpy(zero_copy_only=False)


def csv_bytes(frame: pd.DataFrame) -> bytes:
    """The frame as the CSV COPY reads: numbers as Arrow writes them (the shortest text that reads back to the same
    double), times as 'YYYY-MM-DD HH:MM:SS.ffffff', a missing value (NaN, NaT, None) as NULL."""
    arrays = {}
    for name in frame.columns:
        series = frame[name]
        if pd.api.types.is_datetime64_any_dtype(series):
            arrays[name] = pa.array(series.to_numpy(dtype="datetime64[us]"), type=pa.timestamp("us"),
                                    from_pandas=True)
        elif pd.api.types.is_float_dtype(series):
            arrays[name] = pa.array(series.to_numpy(dtype=float), type=pa.float64(), from_pandas=True)
        elif pd.api.types.is_integer_dtype(series):
            arrays[name] = pa.array(series.to_numpy(dtype=np.int64), type=pa.int64())
        else:
            values = series.astype(object)
            arrays[name] = pa.array(values.where(values.notna(), None).tolist(), type=pa.string())
    sink = io.BytesIO()
    arrow_csv.write_csv(pa.table(arrays), sink, _CSV_OPTIONS)
    return sink.getvalue()


def _records(frame: pd.DataFrame) -> list[dict]:
    """Rows as plain dicts for SQLAlchemy's executemany insert: NaN/NaT -> None, numpy scalars -> Python."""
    columns = {}
    for name in frame.columns:
        series = frame[name]
        if pd.api.types.is_datetime64_any_dtype(series):
            values = [None if pd.isna(v) else v.to_pydatetime() for v in series]
        else:
            values = [None if pd.isna(v) else (v.item() if isinstance(v, np.generic) else v)
                      for v in series.astype(object)]
        columns[name] = values
    return [dict(zip(columns, row, strict=True)) for row in zip(*columns.values(), strict=True)]
