"""Alembic environment: runs on a connection handed in by fleet (fleet.db.migrate) or on FLEET_DATABASE_URL."""

from alembic import context
from sqlalchemy import pool

from fleet.db import models  # noqa: F401  (registers every table on Base.metadata)
from fleet.db.base import Base
from fleet.db.engine import database_url, make_engine

config = context.config
target_metadata = Base.metadata


def run_migrations_offline() -> None:
    context.configure(
        url=database_url(),
        target_metadata=target_metadata,
        literal_binds=True,
        render_as_batch=True,
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def _run(connection) -> None:
    # render_as_batch: SQLite cannot ALTER most things; batch mode copies the table, and PostgreSQL is unaffected.
    context.configure(
        connection=connection, target_metadata=target_metadata, render_as_batch=True, compare_type=True
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = make_engine(poolclass=pool.NullPool)  # FLEET_DATABASE_URL, else the default SQLite file
    with engine.begin() as conn:
        _run(conn)
    engine.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
