"""The readings import in blocks (fleet/services/transfer/reading_blocks.py) finds and stores exactly what one pass
over the whole table does: the same problems in the same words, the same doubts, nothing kept on a refusal.

Reference: the same import with one block holding every row (no helper thread, nothing stored before every row is
checked), and the rows themselves read back through the ORM."""

import io
import math
from datetime import datetime

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from fleet.db.models import Reading
from fleet.io.files import read_csv
from fleet.io.parse import ImportRejected
from fleet.services.transfer import reading_blocks
from fleet.services.transfer.bulk import csv_bytes
from fleet.services.transfer.importing import check_readings, import_file, import_table, read_readable
from tests.conftest import DATA

NOW = datetime(2026, 1, 1)
COLUMNS = ["pump", "taken_at", "hours", "outlet_pressure", "speed", "outlet_flow", "oil_temp", "note"]


def _row(pump: str, day: int, hours: float, note: str = "") -> list[str]:
    return [pump, f"2025-03-{day:02d} 08:00", f"{hours:g}", "230", "1490", "63.1", "48", note]


def _table(rows: list[list[str]]) -> pd.DataFrame:
    """Rows as a CSV file's cells (Arrow text, as fleet.io.files reads them)."""
    text = ",".join(COLUMNS) + "\n" + "".join(",".join(row) + "\n" for row in rows)
    return read_csv(text.encode())


@pytest.fixture
def pumps(db):
    with db.sessions.begin() as session:
        import_file(session, "pumps", DATA / "pumps_small.csv")
    with db.sessions.begin() as session:  # one reading stored before: a later clash with it is "already stored"
        import_table(session, "readings", _table([_row("T-102", 1, 900)]), now=NOW)
    return db


def _collect(db, run):
    """(problems as text or None, doubts, readings stored after) of ``run(session)``, an import of readings."""
    try:
        with db.sessions.begin() as session:
            result = run(session)
        problems, doubts = None, result.doubts
    except ImportRejected as rejected:
        problems, doubts = [str(p) for p in rejected.problems], []
    with db.sessions() as session:
        stored = session.execute(select(Reading.pump_id, Reading.taken_at, Reading.hours, Reading.note)
                                 .order_by(Reading.pump_id, Reading.taken_at)).all()
    return problems, doubts, stored


def _attempt(db, table: pd.DataFrame, block_rows: int, monkeypatch):
    """``_collect`` of one import of ``table`` with blocks of ``block_rows``."""
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", block_rows)
    return _collect(db, lambda session: import_table(session, "readings", table, now=NOW))


CASES = {
    "clean, with a meter doubt across blocks": [_row("T-101", d, 100 + 10 * d) for d in range(1, 8)]
    + [_row("T-101", 9, 50)],
    "a bad cell in the last block, a repeat in the first": [_row("T-101", 1, 10), _row("T-101", 1, 11)]
    + [_row("T-101", d, 10 * d) for d in range(2, 7)] + [_row("T-101", 8, -5)],
    "a repeat across blocks": [_row("T-101", d, 10 * d) for d in range(1, 6)] + [_row("T-101", 2, 99)],
    "already stored, in a late block": [_row("T-101", d, 10 * d) for d in range(1, 6)] + [_row("T-102", 1, 901)],
    "an unknown pump and a repeat": [_row("T-101", d, 10 * d) for d in range(1, 5)] + [_row("X-9", 3, 1)]
    + [_row("T-101", 4, 1)],
    "clean, notes with the export's formula guard in a later block only": [_row("T-101", d, 10 * d)
                                                                             for d in range(1, 6)]
    + [_row("T-101", 6, 60, note="'=1+1"), _row("T-101", 7, 70, note="''=x"), _row("T-101", 8, 80, note="'plain")],
    "an unknown pump and a bad cell": [_row("X-9", 3, 1), _row("T-101", 3, 1)] + [_row("T-101", 4, 10)] * 3
    + [_row("T-101", 20, float("nan"))],
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_blocks_find_and_store_what_one_pass_does(pumps, monkeypatch, name):
    table = _table(CASES[name])
    before = _attempt(pumps, table, 2, monkeypatch)  # blocks of two rows, a savepoint (a helper on PostgreSQL)
    with pumps.sessions.begin() as session:  # back to the one stored reading
        session.execute(Reading.__table__.delete().where(Reading.hours != 900))
    one_pass = _attempt(pumps, table, 10_000, monkeypatch)
    assert before == one_pass
    problems, _doubts, stored = before
    assert (problems is None) == (name.startswith("clean"))
    assert len(stored) == (1 + len(table) if problems is None else 1)  # a refusal keeps nothing of any block


def test_blocks_report_the_same_doubts_and_store_every_row(pumps, monkeypatch):
    # Reference: the rows as written in the file, and fleet.io.meter's one rule asked in a single pass.
    table = _table(CASES["clean, with a meter doubt across blocks"])
    problems, doubts, stored = _attempt(pumps, table, 3, monkeypatch)
    assert problems is None
    assert [(d["row"], d["code"]) for d in doubts] == [(9, "hours_backwards")]
    assert [s.hours for s in stored if s.pump_id != 2] == [110, 120, 130, 140, 150, 160, 170, 50]


def test_check_readings_in_blocks_writes_nothing(pumps, monkeypatch):
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", 2)
    with pumps.sessions.begin() as session:
        problems = check_readings(session, _table(CASES["a repeat across blocks"]), NOW)
        assert session.scalar(select(func.count(Reading.id))) == 1
    assert [(p.row, p.column) for p in problems] == [(7, "taken_at")]


def test_a_note_that_reads_as_the_end_of_copy_data_is_stored_as_written(pumps):
    # '\.' alone ends COPY's text data; quoted in CSV it is a value. Reference: the note read back through the ORM.
    with pumps.sessions.begin() as session:
        import_table(session, "readings", _table([_row("T-101", 5, 10, "\\."), _row("T-101", 6, 11, '"a, ""b"""')]),
                     now=NOW)
    with pumps.sessions() as session:
        notes = session.scalars(select(Reading.note).where(Reading.pump_id == 1).order_by(Reading.taken_at)).all()
    assert notes == ["\\.", 'a, "b"']


@settings(max_examples=60, deadline=None)
@given(st.lists(st.one_of(st.floats(allow_nan=False, allow_infinity=False, width=64), st.none()), min_size=1,
                max_size=30),
       st.lists(st.one_of(st.text(alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"),
                                  max_size=12), st.none()), min_size=1, max_size=30))
def test_copy_text_reads_back_to_the_same_values(numbers, texts):
    # Reference: Python's csv module and float(), reading the CSV as COPY's CSV format does (an unquoted empty
    # field is NULL, a quoted one is text).
    import csv

    size = min(len(numbers), len(texts))
    frame = pd.DataFrame({"x": pd.Series(numbers[:size], dtype=float), "s": pd.Series(texts[:size], dtype=object)})
    data = csv_bytes(frame).decode()
    rows = list(csv.reader(io.StringIO(data, newline="")))
    assert len(rows) == size
    for (x_text, s_text), x, s in zip(rows, numbers[:size], texts[:size], strict=True):
        assert (x_text == "") == (x is None)
        if x is not None:
            assert float(x_text) == x and math.copysign(1, float(x_text)) == math.copysign(1, x)
        assert s_text == ("" if s is None else s)
    for position, s in enumerate(texts[:size]):  # a missing text is an unquoted empty field, any other quoted
        line = csv_bytes(frame.iloc[[position]]).decode()
        assert line.endswith(",\n") == (s is None) and line.endswith('"\n') == (s is not None)


def test_later_blocks_read_cells_by_their_pumps_site(pumps, monkeypatch):
    # The first block's serials are looked up before it, the others while it is parsed: a pump first met in a later
    # block still has its site's decimal comma and time zone. Reference: the same file in one block.
    with pumps.sessions.begin() as session:
        import_table(session, "sites", pd.DataFrame([{"site": "Test Works (invented)", "decimal_comma": "yes",
                                                      "time_zone": "America/Chicago"}]))
    rows = [_row("T-101", d, 10 * d) for d in range(1, 5)] + [_row("T-103", d, 100 + d) for d in range(1, 4)]
    rows[-1][6] = '"48,5"'  # quoted in the file, so its comma is no separator
    table = _table(rows)
    blocks = _attempt(pumps, table, 2, monkeypatch)
    with pumps.sessions.begin() as session:
        session.execute(Reading.__table__.delete().where(Reading.hours != 900))
    assert blocks == _attempt(pumps, table, 10_000, monkeypatch)
    problems, _doubts, stored = blocks
    assert problems is None
    last = [s for s in stored if s.hours == 103][0]
    assert last.taken_at == datetime(2025, 3, 3, 14, 0)  # 08:00 in Chicago (UTC-6 before March 9, 2025) is 14:00 UTC


def _csv_file(tmp_path, rows: list[list[str]], name: str = "readings.csv"):
    path = tmp_path / name
    path.write_text(",".join(COLUMNS) + "\n" + "".join(",".join(row) + "\n" for row in rows))
    return path


def _outcome(db, run):
    """``_collect`` of ``run``, then the database back to the one reading stored before."""
    outcome = _collect(db, run)
    with db.sessions.begin() as session:
        session.execute(Reading.__table__.delete().where(Reading.hours != 900))
    return outcome


@pytest.mark.parametrize("name", sorted(CASES))
def test_a_streamed_file_finds_and_stores_what_its_whole_table_does(pumps, tmp_path, monkeypatch, name):
    # Reference: the same file read whole (fleet.io.files.read_csv) and imported as one table in one block.
    from fleet.io import files
    from fleet.services.transfer import importing

    path = _csv_file(tmp_path, CASES[name])
    monkeypatch.setitem(files._READ_OPTIONS, "block_size", 200)  # pyarrow hands a few rows at a time
    streamed = files.stream_csv(path)
    assert len(list(streamed.blocks(iter([2] * 100)))) > 2  # the file is read in blocks indeed
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", 2)
    monkeypatch.setattr(importing, "read_readable", None)  # the streamed path reads no table
    in_blocks = _outcome(pumps, lambda session: import_file(session, "readings", path, now=NOW))
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", 10_000)
    whole = _outcome(pumps, lambda session: import_table(session, "readings", read_csv(path), now=NOW,
                                                         skip_stored_same=True))  # as import_file
    assert in_blocks == whole
    assert (in_blocks[0] is None) == name.startswith("clean")


@pytest.mark.parametrize("last", ["ragged", "short"])
def test_a_file_pyarrow_refuses_further_on_is_read_whole(pumps, tmp_path, monkeypatch, last):
    # A row pyarrow's reader refuses after the first blocks were stored: they are undone and the file is read whole
    # by pandas' reader, as before streaming (a row of too many cells is no CSV it reads, a short one is).
    # Reference: the file read whole (read_readable, which words an unreadable file) and imported as one table.
    from fleet.io import files

    rows = [_row("T-101", d, 10 * d) for d in range(1, 28)]
    rows.append(_row("T-103", 1, 5) + ["extra"] if last == "ragged" else _row("T-103", 1, 5)[:-1])
    path = _csv_file(tmp_path, rows)
    monkeypatch.setitem(files._READ_OPTIONS, "block_size", 200)
    handed = []
    with pytest.raises(files.StreamBroken):  # the precondition: the stream breaks after handing out blocks
        for block in files.stream_csv(path).blocks(iter([2] * 100)):
            handed.append(block)
    assert len(handed) > 2
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", 2)
    streamed = _outcome(pumps, lambda session: import_file(session, "readings", path, now=NOW))
    monkeypatch.setattr(reading_blocks, "BLOCK_ROWS", 10_000)

    reference = _outcome(pumps, lambda session: import_table(session, "readings", read_readable(path)[0], now=NOW))
    assert streamed == reference
    if last == "ragged":
        assert streamed[0] is not None and len(streamed[2]) == 1  # refused: nothing of the early blocks stays
    else:
        assert streamed[0] is None and len(streamed[2]) == 1 + len(rows)


def test_rows_many_to_a_statement_are_stored_as_one_to_a_statement(pumps, monkeypatch):
    # Reference: the same rows inserted one to a statement (sqlite3's executemany of one-row INSERTs): the same ids,
    # values and SQLite storage classes (typeof) in every column.
    from sqlalchemy import text

    from fleet.services.transfer import bulk

    if pumps.engine.dialect.name != "sqlite":
        pytest.skip("SQLite's INSERT statements; PostgreSQL takes COPY")
    rows = [_row(f"T-10{1 + d % 3}", 2 + d // 3, 10 * d, note="n" if d % 7 == 0 else "") for d in range(80)]
    rows[5][5] = ""  # a missing flow
    table = _table(rows)
    stored = []
    for per in (1, 50):
        monkeypatch.setattr(bulk, "SQLITE_ROWS_PER_STATEMENT", per)
        with pumps.sessions.begin() as session:
            import_table(session, "readings", table, now=NOW)
        with pumps.sessions() as session:
            columns = [c.name for c in Reading.__table__.columns if c.name != "created_at"]
            stored.append(session.execute(text(
                f"SELECT {', '.join(columns)}, {', '.join(f'typeof({c})' for c in columns)} FROM reading "
                "ORDER BY id")).all())
        with pumps.sessions.begin() as session:
            session.execute(Reading.__table__.delete().where(Reading.hours != 900))  # the next ids as before
    assert len(stored[0]) == 81 and stored[0] == stored[1]


def test_the_benchmark_floor_with_shared_columns_stores_what_the_plain_floor_stores(pumps, tmp_path, monkeypatch):
    # Reference: benchmarks.run's plain floor (every cell of every row its own parameter, sqlite3's executemany)
    # into a copy of the same database: the floor whose statements bind a column holding one value in all of an
    # import's rows once (or write NULL) stores the same rows in the same order, values and storage classes
    # (typeof), and both what the import stored.
    import shutil
    import sqlite3

    from benchmarks.run import READING_COLUMNS, _checkpoint, _floor_insert
    from fleet.services.transfer import bulk

    if pumps.engine.dialect.name != "sqlite":
        pytest.skip("the SQLite floor")
    monkeypatch.setattr(bulk, "SQLITE_ROWS_PER_STATEMENT", 3)
    for first in (2, 12):  # two imports: two created_at, notes in the second only, a missing flow in the first
        rows = [_row(f"T-10{1 + d % 3}", first + d // 3, 10 * d, note="n" if first == 12 and d % 4 else "")
                for d in range(25)]
        if first == 2:
            rows[4][5] = ""
        with pumps.sessions.begin() as session:
            import_table(session, "readings", _table(rows), now=NOW)
    pumps.engine.dispose()
    source = tmp_path / "source.sqlite"
    _checkpoint(pumps.engine.url.database)
    shutil.copyfile(pumps.engine.url.database, source)
    read = (f"SELECT {', '.join(READING_COLUMNS)}, {', '.join(f'typeof({c})' for c in READING_COLUMNS)} "
            "FROM reading ORDER BY id")
    stored = []
    for shared in (False, True):
        floor = tmp_path / f"floor-{shared}.sqlite"
        shutil.copyfile(source, floor)
        with sqlite3.connect(floor) as connection:
            connection.execute("DELETE FROM reading")
        _floor_insert(source, floor, shared=shared)
        with sqlite3.connect(floor) as connection:
            stored.append(connection.execute(read).fetchall())
    with sqlite3.connect(source) as connection:
        imported = connection.execute(read).fetchall()
    assert len(imported) == 51 and stored[0] == stored[1] == imported
