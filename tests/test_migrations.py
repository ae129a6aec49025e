"""The schema comes only from the migrations, and they agree with the models."""

from sqlalchemy import inspect

from fleet.db import migrate
from fleet.db.base import Base
from fleet.db.engine import make_engine


def test_upgrade_on_an_empty_database_reaches_head(empty_database_url):
    engine = make_engine(empty_database_url)
    assert migrate.current_revision(engine) is None
    migrate.upgrade(engine)
    assert migrate.current_revision(engine) == migrate.head_revision()
    tables = set(inspect(engine).get_table_names())
    assert set(Base.metadata.tables) <= tables
    engine.dispose()


def test_models_and_migrations_agree(db):
    # alembic's own comparison (the 'alembic check' command) raises when autogenerate would write anything.
    migrate.check(db.engine)


def test_downgrade_to_empty_and_up_again(db):
    migrate.downgrade_to_empty(db.engine)
    assert not set(Base.metadata.tables) & set(inspect(db.engine).get_table_names())
    migrate.upgrade(db.engine)
    migrate.check(db.engine)


def test_sqlite_runs_with_wal_foreign_keys_and_busy_timeout(tmp_path):
    engine = make_engine(f"sqlite:///{tmp_path / 'x.sqlite'}")
    with engine.connect() as connection:
        assert connection.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert connection.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
        assert connection.exec_driver_sql("PRAGMA busy_timeout").scalar() >= 5000
    engine.dispose()
