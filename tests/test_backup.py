"""`fleet backup FILE` and `fleet restore FILE`: a round trip brings back every row; bad files are refused."""

import sqlite3

import pytest
from click.testing import CliRunner
from sqlalchemy import func, inspect, select, text

from fleet.cli import main
from fleet.db import migrate
from fleet.db.base import Base
from fleet.db.models import Reading


def _table_counts(engine) -> dict[str, int]:
    names = sorted(set(Base.metadata.tables) & set(inspect(engine).get_table_names()))
    with engine.connect() as connection:
        return {name: connection.execute(text(f'SELECT count(*) FROM "{name}"')).scalar() for name in names}


def _cli(url: str, *args: str):
    return CliRunner().invoke(main, ["--database", url, *args])


@pytest.fixture
def sqlite_demo(demo_db):
    if not demo_db.url.startswith("sqlite"):
        pytest.skip("the online backup is SQLite's; PostgreSQL sites use pg_dump (checked below)")
    return demo_db


def test_backup_then_restore_brings_back_every_row(sqlite_demo, tmp_path):
    counts = _table_counts(sqlite_demo.engine)
    assert counts["reading"] > 1000  # the invented demo plant
    copy = tmp_path / "saved.sqlite"
    result = _cli(sqlite_demo.url, "backup", str(copy))
    assert result.exit_code == 0, result.output
    assert f"revision {migrate.head_revision()}" in result.output

    # lose readings after the backup, as a bad day would
    with sqlite_demo.sessions.begin() as session:
        session.execute(Reading.__table__.delete().where(Reading.id > 100))
    assert _table_counts(sqlite_demo.engine)["reading"] == 100

    result = _cli(sqlite_demo.url, "restore", str(copy))
    assert result.exit_code == 0, result.output
    sqlite_demo.engine.dispose()
    assert _table_counts(sqlite_demo.engine) == counts
    with sqlite_demo.engine.connect() as connection:
        assert connection.exec_driver_sql("PRAGMA integrity_check").scalar() == "ok"
    # the database as it was before the restore is kept beside it, with the loss in it
    kept = [p for p in (tmp_path).iterdir() if ".before-restore-" in p.name]
    assert len(kept) == 1 and f"kept the database as it was in {kept[0]}" in result.output
    with sqlite3.connect(kept[0]) as connection:
        assert connection.execute("SELECT count(*) FROM reading").fetchone()[0] == 100
    connection.close()


def test_backup_refuses_to_overwrite_without_asking(sqlite_demo, tmp_path):
    copy = tmp_path / "saved.sqlite"
    copy.write_text("something else")
    result = _cli(sqlite_demo.url, "backup", str(copy))
    assert result.exit_code == 1 and "--overwrite" in result.output
    assert copy.read_text() == "something else"
    assert _cli(sqlite_demo.url, "backup", "--overwrite", str(copy)).exit_code == 0


@pytest.mark.parametrize("make, words", [
    (lambda p: p.write_bytes(b"not a database at all" * 100), "not a SQLite database"),
    (lambda p: sqlite3.connect(p).execute("CREATE TABLE x (a)").connection.commit(), "not a fleet database"),
    (lambda p: _fake_revision(p, "9999"), "does not know"),
])
def test_restore_refuses_a_file_that_is_not_a_fleet_database(sqlite_demo, tmp_path, make, words):
    bad = tmp_path / "bad.sqlite"
    make(bad)
    before = _table_counts(sqlite_demo.engine)
    result = _cli(sqlite_demo.url, "restore", str(bad))
    assert result.exit_code == 1 and words in result.output
    assert _table_counts(sqlite_demo.engine) == before
    assert not [p for p in tmp_path.iterdir() if ".before-restore-" in p.name]


def _fake_revision(path, revision: str) -> None:
    with sqlite3.connect(path) as connection:
        connection.execute("CREATE TABLE alembic_version (version_num VARCHAR(32))")
        connection.execute("INSERT INTO alembic_version VALUES (?)", (revision,))
    connection.close()


def test_restoring_an_older_revision_says_to_run_init(sqlite_demo, tmp_path):
    old = tmp_path / "old.sqlite"
    from fleet.db.engine import make_engine

    engine = make_engine(f"sqlite:///{old}")
    migrate.upgrade(engine, "0001")
    engine.dispose()
    result = _cli(sqlite_demo.url, "restore", str(old))
    assert result.exit_code == 0, result.output
    assert "run 'fleet init'" in result.output
    assert _cli(sqlite_demo.url, "init").exit_code == 0
    sqlite_demo.engine.dispose()
    assert migrate.current_revision(sqlite_demo.engine) == migrate.head_revision()
    with sqlite_demo.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Reading)) == 0


def test_on_postgresql_backup_and_restore_point_to_pg_dump(tmp_path):
    url = "postgresql+psycopg://someone@127.0.0.1:1/nothing"  # never connected: refused before any connection
    for args in (("backup", str(tmp_path / "x.sqlite")), ("restore", __file__)):
        result = _cli(url, *args)
        assert result.exit_code == 1 and "pg_dump" in result.output


def test_copy_to_an_empty_database_carries_every_row_and_new_rows_get_fresh_ids(demo_db, empty_database_url):
    target_url = empty_database_url  # on the PostgreSQL pass: a SQLite-or-server demo copied into the server
    counts = _table_counts(demo_db.engine)
    result = _cli(demo_db.url, "copy", target_url)
    assert result.exit_code == 0, result.output
    assert f"copied {sum(counts.values())} rows of {len(counts)} tables" in result.output
    from fleet.db.audit import column_values, row_values
    from fleet.db.engine import make_engine, make_session_factory

    target = make_engine(target_url)
    assert _table_counts(target) == counts
    with demo_db.sessions() as source_session, make_session_factory(target).begin() as session:
        first = source_session.scalar(select(Reading).order_by(Reading.id).limit(1))
        copied = session.get(Reading, first.id)
        assert row_values(copied) == row_values(first)
        # ids go on after the copied ones (PostgreSQL's sequences were moved on)
        fresh = Reading(**{**column_values(Reading, row_values(first)), "id": None,
                           "taken_at": first.taken_at.replace(year=1999)})
        session.add(fresh)
        session.flush()
        assert fresh.id > counts["reading"]
    again = _cli(demo_db.url, "copy", target_url)
    assert again.exit_code == 1 and "already holds" in again.output
    target.dispose()
