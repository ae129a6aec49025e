"""Many rows into one table at once, inside the caller's unit of work: the readings and events of an import.

Each column is converted once, over the whole column, to the values the driver takes: on SQLite the rows go to
sqlite3's executemany as tuples; on PostgreSQL they stream through COPY (psycopg 3's ``cursor.copy``), the
server's own bulk path; any other database takes SQLAlchemy Core's executemany insert. Times go as the text each
database keeps (SQLite) or reads (COPY), formatted with numpy, not row by row.
"""

import itertools

import numpy as np
import pandas as pd
from sqlalchemy import insert
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from fleet.db import changes

TIME_TEXT_WIDTH = 26  # YYYY-MM-DD HH:MM:SS.ffffff, how SQLAlchemy stores a DateTime in SQLite


def insert_frame(session: Session, model, frame: pd.DataFrame) -> None:
    """Insert the rows of ``frame`` (columns named as the table's, ``pump_id`` among them) in one statement."""
    if len(frame) == 0:
        return
    changes.note(session, model.__tablename__, "pump_id", {int(p) for p in frame["pump_id"].unique()})
    connection = session.connection()
    dialect = connection.dialect.name
    if dialect not in ("sqlite", "postgresql") or connection.dialect.driver != {"sqlite": "pysqlite",
                                                                                 "postgresql": "psycopg"}[dialect]:
        session.execute(insert(model), _records(frame))
        return
    columns = [_column_values(frame[name], nulls=dialect == "postgresql") for name in frame.columns]
    names = ", ".join(frame.columns)
    if dialect == "sqlite":
        statement = f"INSERT INTO {model.__tablename__} ({names}) VALUES ({', '.join('?' * len(frame.columns))})"
    else:
        statement = f"COPY {model.__tablename__} ({names}) FROM STDIN"
    dbapi_error = connection.dialect.loaded_dbapi.Error
    cursor = connection.connection.cursor()
    try:
        if dialect == "sqlite":
            cursor.executemany(statement, zip(*columns, strict=False))  # repeats end with pump_id, always a list
        else:
            with cursor.copy(statement) as copy:
                for row in zip(*columns, strict=False):
                    copy.write_row(row)
    except dbapi_error as error:
        # As SQLAlchemy would raise it from its own execute: the write unit retries a lock or a key stored twice
        # at once by its type (fleet.db.transaction), and a driver's bare error would pass that by.
        raise DBAPIError.instance(statement, None, error, dbapi_error) from error
    finally:
        cursor.close()


def _column_values(series: pd.Series, nulls: bool):
    """A column as the driver's values: floats, ints, text or None. sqlite3 binds NaN as NULL by itself; COPY
    would write NaN, so with ``nulls`` a missing number becomes None."""
    if pd.api.types.is_datetime64_any_dtype(series):
        values = series.to_numpy(dtype="datetime64[us]")
        if len(values) and (values == values[0]).all():
            return itertools.repeat(time_texts(values[:1])[0])  # one moment for every row (created_at)
        return time_texts(values)
    if pd.api.types.is_float_dtype(series):
        numbers = series.to_numpy(dtype=float)
        if np.isnan(numbers).all():
            return itertools.repeat(None)  # a column the file did not have (stroke of fixed pumps)
        values = numbers.tolist()
        if nulls and np.isnan(numbers).any():
            missing = np.isnan(numbers)
            values = [None if gap else value for value, gap in zip(values, missing.tolist(), strict=True)]
        return values
    if pd.api.types.is_integer_dtype(series):
        return series.to_numpy(dtype=np.int64).tolist()
    values = series.astype(object)
    missing = values.isna().to_numpy()
    if missing.all():
        return itertools.repeat(None)  # a text column the file did not have (note, taken_by)
    return values.where(~missing, None).tolist()


# The digits of every number of 2, 3 and 4 places, as ASCII codes: one table lookup writes a field of a time.
_DIGITS = {width: np.array([[ord(c) for c in f"{n:0{width}d}"] for n in range(10 ** width)], dtype=np.uint8)
           for width in (2, 3, 4)}


def time_texts(values: np.ndarray) -> list[str | None]:
    """Times as 'YYYY-MM-DD HH:MM:SS.ffffff' (None for NaT), built as digits over the whole array at once.

    The date comes from the day count by the proleptic Gregorian arithmetic of H. Hinnant's ``civil_from_days``
    (integer operations only; tests/test_fast_import.py checks it against datetime.strftime)."""
    micros = values.astype("datetime64[us]")
    missing = np.isnat(micros)
    count = np.where(missing, 0, micros.view(np.int64))
    days = count // 86_400_000_000
    of_day = count - days * 86_400_000_000
    shifted = days + 719_468  # days from 0000-03-01
    era = shifted // 146_097
    of_era = shifted - era * 146_097
    year_of_era = (of_era - of_era // 1460 + of_era // 36_524 - of_era // 146_096) // 365
    day_of_year = of_era - (365 * year_of_era + year_of_era // 4 - year_of_era // 100)
    month_from_march = (5 * day_of_year + 2) // 153
    month = np.where(month_from_march < 10, month_from_march + 3, month_from_march - 9)
    fields = (  # (first character, digits, value)
        (0, 4, year_of_era + era * 400 + (month <= 2)),
        (5, 2, month),
        (8, 2, day_of_year - (153 * month_from_march + 2) // 5 + 1),
        (11, 2, of_day // 3_600_000_000), (14, 2, of_day // 60_000_000 % 60), (17, 2, of_day // 1_000_000 % 60),
        (20, 3, of_day // 1000 % 1000), (23, 3, of_day % 1000),
    )
    text = np.empty((len(micros), TIME_TEXT_WIDTH), dtype=np.uint8)
    for position, mark in ((4, "-"), (7, "-"), (10, " "), (13, ":"), (16, ":"), (19, ".")):
        text[:, position] = ord(mark)
    for first, width, value in fields:
        text[:, first:first + width] = _DIGITS[width][value]
    out = text.view(f"S{TIME_TEXT_WIDTH}").ravel().astype(f"U{TIME_TEXT_WIDTH}").tolist()
    if missing.any():
        out = [None if gap else value for value, gap in zip(out, missing.tolist(), strict=True)]
    return out


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
