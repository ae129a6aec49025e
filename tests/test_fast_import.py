"""The fast import path agrees with the plain one: pyarrow's CSV reader with pandas' reader, Arrow's number cast
with Python's float(), numpy's time text with datetime.strftime, the column-wide meter check with the one rule,
and COPY/executemany with what an ORM read sees."""

import csv
import io
import itertools
import json
import math
import os
import subprocess
import sys
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError

from fleet.db.engine import is_unique_violation
from fleet.db.models import Reading
from fleet.io.files import read_csv
from fleet.io.meter import meter_doubt, meter_doubts
from fleet.io.parse import is_arrow_text, parse_table
from fleet.services.transfer.bulk import insert_frame, time_texts
from fleet.services.transfer.importing import import_file, import_table
from tests.conftest import DATA


def _pandas_cells(data: bytes) -> pd.DataFrame:
    """The cells as the plain reader gives them (pandas' C parser, every cell text)."""
    import io

    from fleet.io.formulas import unguard_table

    return unguard_table(pd.read_csv(io.BytesIO(data), dtype=str, keep_default_na=False, skipinitialspace=True,
                                      encoding="utf-8-sig"))


FILES = {
    "plain": b"pump,taken_at,hours\nA-1,2024-01-01 08:00,10\nA-2,2024-01-02,11.5\n",
    "crlf and bom": b"\xef\xbb\xbfpump,hours\r\nA-1,10\r\nA-2,\r\n",
    "quoted comma and newline": b'pump,note\nA-1,"worn, noisy"\nA-2,"two\nlines"\n',
    "NA and null words stay text": b"pump,note\nNA,null\nN/A,nan\n",
    "formula guard": b"pump,note\nA-1,'=1+1\nA-2,''=x\nA-3,'plain\n",
    "blank lines": b"pump,hours\n\nA-1,1\n\nA-2,2\n",
    "blank before a quote": b'pump, note\nA-1, "x, y"\n',
    "header only": b"pump,hours\n",
}


@pytest.mark.parametrize("name", sorted(FILES))
def test_the_arrow_reader_gives_the_cells_pandas_gives(name):
    # Reference: pandas' own CSV reader with the options fleet used before (the cells every other test expects).
    data = FILES[name]
    fast, plain = read_csv(data), _pandas_cells(data)
    assert list(fast.columns) == list(plain.columns)
    assert fast.astype(object).values.tolist() == plain.astype(object).values.tolist()


def test_a_plain_file_is_read_as_arrow_text_and_a_ragged_one_by_pandas():
    assert is_arrow_text(read_csv(FILES["plain"])["pump"])
    for ragged in (b"pump,hours\nA-1,1,2\n", b"pump,hours,note\nA-1,1\n"):  # pyarrow refuses; pandas decides
        fast, plain = read_csv(ragged), _pandas_cells(ragged)
        assert not is_arrow_text(fast["pump"]) and fast.equals(plain)


def test_a_semicolon_file_gives_the_cells_of_its_comma_twin():
    """A spreadsheet where the comma is the decimal mark saves CSV with semicolons: read with the semicolon when the
    header has semicolons and no comma, by pyarrow's reader, its streamed blocks and pandas' reader alike (Python's
    csv module, the reference, reads the comma twin); a header with a comma stays comma-separated."""
    from fleet.io.files import delimiter, stream_csv

    comma = b'pump,taken_at,hours,outlet_flow,note\nA-1,2026-01-05 08:00,12,"12,5","a; b"\nA-2,2026-01-05 09:00,13,7,\n'
    semi = b'pump;taken_at;hours;outlet_flow;note\nA-1;2026-01-05 08:00;12;12,5;"a; b"\nA-2;2026-01-05 09:00;13;7;\n'
    expected = list(csv.reader(io.StringIO(comma.decode())))
    for data in (semi, b"\xef\xbb\xbf" + semi, semi.replace(b';"a; b"', b'; "a; b"')):  # BOM; pandas' reader
        cells = read_csv(data)
        assert [list(cells.columns)] + cells.astype(object).values.tolist() == expected, data
    streamed = stream_csv(semi)
    try:
        blocks = list(streamed.blocks(itertools.repeat(1)))
    finally:
        streamed.close()
    assert sum((b.astype(object).values.tolist() for b in blocks), []) == expected[1:]
    assert delimiter(b"pump,note\nA-1,x;y\n") == "," and delimiter(b"pump;note,x\n") == ","


numbers = st.one_of(
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
    st.from_regex(r"\A[+-]?\d{0,25}\.?\d{0,25}(?:[eE][+-]?\d{1,4})?\Z"),
    st.sampled_from(["inf", "-Infinity", "nan", "1e999", "9" * 400, "1_000", "0x10", "١٢", " 7 ", "", "12,5"]),
)


@settings(max_examples=300, deadline=None)
@given(st.lists(numbers, min_size=1, max_size=20))
def test_numbers_parse_alike_from_arrow_text_and_python_text(cells):
    # Reference: Python's float(), which rounds a decimal to the nearest double (IEEE 754); the Python-string path
    # reads every cell with it, the Arrow path casts plain decimals in Arrow and leaves the rest to float().
    python = pd.DataFrame({"value": pd.Series(cells, dtype=object)})
    arrow = pd.DataFrame({"value": pd.Series(cells, dtype=pd.ArrowDtype(pa.string()))})
    for kind in ("readings",):
        a, a_problems = parse_table(kind, python.rename(columns={"value": "hours"}))
        b, b_problems = parse_table(kind, arrow.rename(columns={"value": "hours"}))
        assert [str(p) for p in a_problems] == [str(p) for p in b_problems]
        left, right = a.data["hours"].to_numpy(), b.data["hours"].to_numpy()
        assert np.array_equal(left, right, equal_nan=True)
    for cell, value in zip(cells, right, strict=True):  # and each plain decimal is float()'s double exactly
        text = cell.strip()
        if text and text.lstrip("+-").replace(".", "", 1).isdigit() and abs(float(text)) <= 1e12:
            assert value == float(text)


# Spaces and tabs only from the samples: Python and Arrow differ on what other control characters count as blank.
texts = st.one_of(st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc", "Zs", "Zl", "Zp")), max_size=130),
                  st.sampled_from(["P-1", " P-1", "P-1\t", "", "a\x00b", "x" * 121, "Pumpe Ä-7"]))


@settings(max_examples=300, deadline=None)
@given(st.lists(texts, min_size=1, max_size=8))
def test_text_parses_alike_from_arrow_text_and_python_text(cells):
    # Reference: Python's str.strip and len on the same cells (the full path strips, refuses a blank required cell, a
    # NUL and text over 120 characters); Arrow text whose every cell is plain skips those steps and must agree.
    for column in ("pump", "note"):
        python = pd.DataFrame({column: pd.Series(cells, dtype=object)})
        a, a_problems = parse_table("readings", python)
        b, b_problems = parse_table("readings", python.astype(pd.ArrowDtype(pa.string())))
        assert [str(p) for p in a_problems] == [str(p) for p in b_problems]
        assert a.data[column].tolist() == b.data[column].tolist()
        plain = [c for c in cells if c.strip() == c and c and "\x00" not in c and len(c) <= 120]
        if len(plain) == len(cells):
            assert b.data[column].tolist() == cells


plain_times = st.tuples(st.integers(1965, 2105), st.integers(0, 13), st.integers(0, 32), st.integers(0, 24),
                        st.integers(0, 61)).map(lambda t: "{:04d}-{:02d}-{:02d} {:02d}:{:02d}".format(*t))


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(plain_times, st.sampled_from(["UTC", "Europe/Berlin", "America/Chicago", None])),
                min_size=1, max_size=8))
def test_plain_times_parse_alike_from_arrow_text_and_python_text(rows):
    # Reference: Python's datetime.strptime and zoneinfo (a wall time in its zone, to UTC), and the full path, which
    # reads Python strings with pandas' ISO 8601 parser; Arrow text whose every cell is 'YYYY-MM-DD HH:MM' is read by
    # Arrow's strptime instead, and must give the same values and the same problems (30 February, 24:00, a time the
    # clocks skip or repeat, a year outside 1970..2100).
    from zoneinfo import ZoneInfo

    from fleet.io.parse import RowConventions

    cells = [cell for cell, _zone in rows]
    conventions = RowConventions(pd.Series([zone for _cell, zone in rows]), pd.Series([False] * len(rows)))
    python = pd.DataFrame({"taken_at": pd.Series(cells, dtype=object)})
    arrow = python.astype(pd.ArrowDtype(pa.string()))
    a, a_problems = parse_table("readings", python, conventions)
    b, b_problems = parse_table("readings", arrow, conventions)
    assert [str(p) for p in a_problems] == [str(p) for p in b_problems]
    left, right = a.data["taken_at"], b.data["taken_at"]
    assert left.dtype == right.dtype and left.isna().equals(right.isna()) and (left == right)[left.notna()].all()
    for (cell, zone), value in zip(rows, right, strict=True):
        if pd.notna(value):
            wall = datetime.strptime(cell, "%Y-%m-%d %H:%M").replace(tzinfo=ZoneInfo(zone or "UTC"))
            assert value.to_pydatetime() == wall.astimezone(ZoneInfo("UTC")).replace(tzinfo=None)


odd_times = st.one_of(
    st.tuples(st.integers(1, 9999), st.integers(0, 19), st.integers(0, 39), st.integers(0, 29), st.integers(0, 69))
    .map(lambda t: "{:04d}-{:02d}-{:02d} {:02d}:{:02d}".format(*t)),
    st.sampled_from(["2024-02-29 10:00", "2023-02-29 10:00", "2100-02-29 00:00", "2000-02-29 23:59",
                     "2024-1-01 10:00", "2024-01-01T10:00", "2024-01-01 10:00 ", "2024/01/01 10:00",
                     "2024-01-01 1a:00", "2024-01-01 10:0\u0660", "2024-01-01", ""]))


# The plain form of ISO 8601 a round sheet or an export writes, which fleet.io.parse.plain_minutes reads from bytes.
PLAIN_TIME = r"^\d{4}-\d{2}-\d{2} \d{2}:\d{2}$"
PLAIN_TIME_FORMAT = "%Y-%m-%d %H:%M"


@settings(max_examples=400, deadline=None)
@given(st.lists(odd_times, min_size=1, max_size=6))
def test_plain_minutes_read_from_bytes_are_what_strptime_reads(cells):
    # Reference: Python's datetime.strptime with PLAIN_TIME_FORMAT on cells matching PLAIN_TIME (the pattern and
    # format the byte reader stands for): every cell such a time gives the same minute, or the column is refused.
    import re

    from fleet.io.parse import plain_minutes

    expected = []
    for cell in cells:
        try:
            expected.append(datetime.strptime(cell, PLAIN_TIME_FORMAT) if re.search(PLAIN_TIME, cell, re.ASCII)
                            else None)
        except ValueError:
            expected.append(None)
    text = pa.array(cells, type=pa.string())
    for column in (text, text.slice(1), pa.chunked_array([text[:1], text[1:]])):  # offsets of a slice or chunks
        wanted = expected[1:] if len(column) < len(cells) else expected
        got = plain_minutes(column)
        if not wanted or any(value is None for value in wanted):
            assert got is None
        else:
            assert got is not None and got.tolist() == wanted


@settings(max_examples=100, deadline=None)
@given(st.lists(st.datetimes(min_value=datetime(1970, 1, 1), max_value=datetime(2100, 12, 31, 23, 59, 59)),
                min_size=1, max_size=50))
def test_time_text_is_what_strftime_writes(moments):
    # Reference: datetime.strftime with the format SQLAlchemy stores in SQLite ('%Y-%m-%d %H:%M:%S.%f').
    values = np.array(moments, dtype="datetime64[us]")
    assert time_texts(values) == [m.strftime("%Y-%m-%d %H:%M:%S.%f") for m in moments]
    assert time_texts(np.array(["NaT"], dtype="datetime64[us]")) == [None]


@settings(max_examples=100, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 3), st.integers(0, 400), st.floats(0, 500, allow_nan=False)),
                min_size=1, max_size=40, unique_by=lambda r: (r[0], r[1])))
def test_the_column_wide_meter_check_finds_what_the_one_rule_finds(rows):
    # Reference: meter_doubt (fleet.io.meter) asked of every reading against the one before it, one by one.
    start = datetime(2025, 1, 1)
    frame = pd.DataFrame({"pump_id": [r[0] for r in rows],
                          "taken_at": [start + timedelta(hours=r[1]) for r in rows],
                          "hours": [round(r[2], 1) for r in rows]})
    # Some readings sit on an allowance's edge (clock hours x 1.02 + 1 h), where rounding could tip either way.
    edge = frame["taken_at"].sub(start).dt.total_seconds().div(3600).mul(1.02).add(1)
    frame.loc[frame.index[::3], "hours"] = edge[::3]
    found = {index: doubt for index, doubt in meter_doubts(frame, frame.iloc[0:0])}
    ordered = frame.sort_values(["pump_id", "taken_at"], kind="stable")
    expected = {}
    for _pump, group in ordered.groupby("pump_id"):
        previous = None
        for index, row in group.iterrows():
            if previous is not None:
                doubt = meter_doubt(previous["taken_at"].to_pydatetime(), float(previous["hours"]),
                                    row["taken_at"].to_pydatetime(), float(row["hours"]))
                if doubt:
                    expected[index] = doubt
            previous = row
    assert found == expected


def test_bulk_insert_stores_what_the_orm_reads_back(db):
    # Reference: the values themselves, read back through the ORM (SQLite executemany, or COPY on PostgreSQL).
    with db.sessions.begin() as session:
        import_file(session, "pumps", DATA / "pumps_small.csv")
    table = pd.DataFrame({"pump": ["T-101", "T-101"], "taken_at": ["2024-03-01 08:00:00.123456", "2024-03-02 08:00"],
                          "hours": ["1000", "1010"], "outlet_pressure": ["230", "231"], "speed": ["1490", "1490"],
                          "outlet_flow": ["63.1", ""], "oil_temp": ["48", "49"], "note": ["tab\there", ""],
                          "taken_by": ["back\\slash", ""]})
    with db.sessions.begin() as session:
        import_table(session, "readings", table.astype(pd.ArrowDtype(pa.string())))
    with db.sessions() as session:
        rows = session.execute(select(Reading.taken_at, Reading.flow_lpm, Reading.note, Reading.taken_by,
                                      Reading.source).order_by(Reading.taken_at)).all()
    assert rows[0] == (datetime(2024, 3, 1, 8, 0, 0, 123456), 63.1, "tab\there", "back\\slash", "import")
    assert rows[1][1] is None and rows[1][2] is None and not math.isnan(rows[0][1])


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.floats(allow_infinity=False) | st.just(math.nan), st.integers(1, 2**40),
                          st.datetimes(min_value=datetime(1970, 1, 1), max_value=datetime(2100, 12, 31)) | st.none(),
                          st.text(max_size=5) | st.none()), max_size=130),
       st.integers(1, 7), st.booleans())
def test_sqlite_statement_parameters_are_each_cell_as_python_gives_it(rows, per, notes):
    # Reference: each cell made by hand with Python's own types (float, int, strftime's time text, str or None),
    # row after row: the cells the statements' parameters and shape give each row must be those, value and type
    # (a NULL column missing in every row), and SQLite must store what the plain statement (one row, every column
    # its own parameter, as sqlite3's executemany is documented to bind) stores: the same values and storage
    # classes (typeof).
    from sqlalchemy import create_engine
    from sqlalchemy.orm import Session

    from fleet.services.transfer import bulk

    if not notes:
        rows = [(hours, pump, moment, None) for hours, pump, moment, _note in rows]
    frame = pd.DataFrame({"pump_id": pd.Series([r[1] for r in rows], dtype=np.int64),
                          "hours": pd.Series([r[0] for r in rows], dtype=float),
                          "taken_at": pd.Series([r[2] for r in rows], dtype="datetime64[ns]"),
                          "note": pd.Series([r[3] for r in rows], dtype=object)})
    made = datetime(2026, 1, 2, 3, 4, 5, 6)
    columns = ["pump_id", "hours", "taken_at", "note", "source", "taken_by", "created_at"]
    same = {"source": "import", "taken_by": None, "created_at": pd.Timestamp(made)}
    expected = [[pump, float(hours), None if moment is None else moment.strftime("%Y-%m-%d %H:%M:%S.%f"), note,
                 "import", None, "2026-01-02 03:04:05.000006"] for hours, pump, moment, note in rows]
    with Session(create_engine("sqlite://")) as session:
        writer = bulk.BulkInsert(session, Reading, columns)
        writer.per = per
        prepared = writer.prepare(frame, same)
        shape = prepared.rows.shape
        assert shape[columns.index("taken_by")] == bulk.NULL and shape[columns.index("source")] == bulk.ONCE
        assert (shape[columns.index("note")] == bulk.NULL) == all(r[3] is None for r in rows)

        def cells(parameters: list, count: int) -> list[list]:
            bound, made_rows = shape.count(bulk.ROW), []
            for row in range(count):
                own, shared, cells = iter(parameters[row * bound:]), iter(parameters[count * bound:]), []
                for kind in shape:
                    cells.append(next(own) if kind == bulk.ROW else next(shared) if kind == bulk.ONCE else bulk.NULL)
                made_rows.append(cells)
            return made_rows

        got = [cell for group in prepared.rows.grouped for cell in cells(group, per)]
        got += [cell for one in prepared.rows.rest for cell in cells(one, 1)]
        assert [len(group) for group in prepared.rows.grouped] == \
            [per * shape.count(bulk.ROW) + shape.count(bulk.ONCE)] * (len(rows) // per)

        def missing(value):  # what sqlite3 binds as NULL
            return value is None or (isinstance(value, float) and math.isnan(value))

        def same_cell(a, b):
            if a is bulk.NULL:  # written NULL: the cell must be missing
                return missing(b)
            if b is None:  # a missing text may be bound as a NaN
                return missing(a)
            return type(a) is type(b) and (a == b or (isinstance(a, float) and math.isnan(a) and math.isnan(b)))

        assert len(got) == len(expected)
        assert all(same_cell(a, b) for cells_got, want in zip(got, expected, strict=True)
                   for a, b in zip(cells_got, want, strict=True))

        raw = session.connection().connection
        raw.execute("CREATE TABLE reading (id INTEGER PRIMARY KEY, pump_id INTEGER, hours FLOAT, taken_at DATETIME, "
                    "note TEXT, source VARCHAR(16), taken_by VARCHAR(120), created_at DATETIME)")
        read = f"SELECT id, {', '.join(columns)}, {', '.join(f'typeof({c})' for c in columns)} FROM reading ORDER BY id"
        cursor = raw.cursor()
        writer._sqlite_rows(cursor, prepared)
        stored = raw.execute(read).fetchall()
        raw.execute("DELETE FROM reading")
        cursor.executemany(f"INSERT INTO reading ({', '.join(columns)}) VALUES ({', '.join('?' * len(columns))})",
                           expected)
        assert stored == raw.execute(read).fetchall()


def test_a_key_stored_twice_by_the_bulk_insert_is_the_error_the_write_unit_retries(db):
    # The bulk insert talks to the driver (sqlite3 executemany, psycopg COPY) below SQLAlchemy; its errors must still
    # be SQLAlchemy's, or the write unit cannot tell two devices saving the same reading at once from a crash.
    with db.sessions.begin() as session:
        import_file(session, "pumps", DATA / "pumps_small.csv")
    table = pd.DataFrame({"pump": ["T-101"], "taken_at": ["2024-03-01 08:00"], "hours": ["1000"],
                          "outlet_pressure": ["230"], "speed": ["1490"], "outlet_flow": ["63.1"], "oil_temp": ["48"]})
    with db.sessions.begin() as session:
        import_table(session, "readings", table)
    with db.sessions() as session, session.begin():
        stored = pd.read_sql(select(Reading.__table__), session.connection())
        frame = stored.drop(columns=["id"]).dropna(axis=1)  # the same reading again, every value given
        with pytest.raises(IntegrityError) as raised:
            insert_frame(session, Reading, frame)
    assert is_unique_violation(raised.value)


@pytest.mark.slow
def test_the_import_floor_benchmark_runs_at_its_small_size(tmp_path):
    # A smoke test: the figures are reported (on PostgreSQL too when a server is given), never timed here.
    out = tmp_path / "import.json"
    command = [sys.executable, "-m", "benchmarks.import_floors", "--size", "small", "--out", str(out)]
    server = os.environ.get("FLEET_TEST_DATABASE_URL")
    if server:
        command += ["--database", server]
    done = subprocess.run(command, cwd=Path(__file__).resolve().parents[1], capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    figures = json.loads(out.read_text())
    assert figures["readings"] == 40 * 60
    for name in ("import_s", "import_floor_s", "import_ratio") + (("pg_import_ratio",) if server else ()):
        assert math.isfinite(figures[name]) and figures[name] > 0, name
