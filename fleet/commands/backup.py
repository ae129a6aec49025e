"""`fleet backup FILE` and `fleet restore FILE`: a consistent copy of a SQLite database, and putting one back.

Both use SQLite's online backup (sqlite3.Connection.backup): it copies page by page under SQLite's own locks,
so the dashboard may keep serving while a backup is taken, and a restore replaces the whole database at once
(readers never see half of it). A PostgreSQL site backs up with its own tools (pg_dump / pg_restore).
"""

import os
import sqlite3
from pathlib import Path

import click

from fleet.timeutil import utcnow

POSTGRESQL_POINTER = ("this database is not SQLite; back it up with PostgreSQL's own tools, e.g. "
                      "'pg_dump --format=custom --file fleet.dump DBNAME', and restore with 'pg_restore --clean "
                      "--dbname DBNAME fleet.dump'")


class NotAFleetDatabase(click.ClickException):
    pass


def sqlite_path(url: str) -> Path:
    """The file of a SQLite URL; refuses any other database with a pointer to pg_dump."""
    from sqlalchemy.engine import make_url

    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite":
        raise click.ClickException(POSTGRESQL_POINTER)
    if not parsed.database or parsed.database == ":memory:":
        raise click.ClickException("an in-memory SQLite database has nothing to back up")
    return Path(parsed.database)


def copy_database(source: Path, target: Path) -> None:
    """Online backup of ``source`` into ``target`` (created or overwritten), page by page."""
    with sqlite3.connect(f"file:{source}?mode=ro", uri=True) as reader, sqlite3.connect(target) as writer:
        reader.backup(writer)
    reader.close()
    writer.close()


def known_revisions() -> set[str]:
    from alembic.script import ScriptDirectory

    from fleet.db import migrate

    return {script.revision for script in ScriptDirectory.from_config(migrate.alembic_config()).walk_revisions()}


def check_fleet_file(path: Path) -> str:
    """The revision of a fleet database file; NotAFleetDatabase when it is none, is damaged or too new."""
    known = known_revisions()
    try:
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as connection:
            integrity = connection.execute("PRAGMA integrity_check").fetchone()[0]
            tables = {row[0] for row in connection.execute("SELECT name FROM sqlite_master WHERE type='table'")}
            revision = (connection.execute("SELECT version_num FROM alembic_version").fetchone() or [None])[0] \
                if "alembic_version" in tables else None
        connection.close()
    except sqlite3.DatabaseError as error:
        raise NotAFleetDatabase(f"{path} is not a SQLite database ({error})") from error
    if integrity != "ok":
        raise NotAFleetDatabase(f"{path} is damaged: integrity check says {integrity!r}")
    if revision is None:
        raise NotAFleetDatabase(f"{path} is not a fleet database (no migration revision recorded)")
    if revision not in known:
        raise NotAFleetDatabase(f"{path} is at revision {revision}, which this version of fleet does not know "
                                f"(known: {', '.join(sorted(known))}); use the fleet that wrote it")
    return revision


def register(group: click.Group) -> None:
    register_copy(group)

    @group.command("backup")
    @click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
    @click.option("--overwrite", is_flag=True, help="replace FILE if it exists")
    @click.pass_obj
    def backup(db, file: Path, overwrite: bool) -> None:
        """Write a consistent copy of the SQLite database to FILE (safe while the dashboard runs)."""
        source = sqlite_path(db.url)
        if not source.exists():
            raise click.ClickException(f"there is no database at {source}")
        if file.exists() and not overwrite:
            raise click.ClickException(f"{file} exists; choose another name or pass --overwrite")
        if file.resolve() == source.resolve():
            raise click.ClickException("the backup cannot be the database itself")
        partial = file.with_name(file.name + ".partial")
        partial.unlink(missing_ok=True)
        copy_database(source, partial)
        revision = check_fleet_file(partial)
        os.replace(partial, file)  # FILE is the old one or the whole new one, never half written
        click.echo(f"backed up {source} to {file} (revision {revision}, {file.stat().st_size} bytes)")

    @group.command("restore")
    @click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
    @click.pass_obj
    def restore(db, file: Path) -> None:
        """Replace the SQLite database with the backup FILE, keeping a copy of the current one beside it."""
        from fleet.db import migrate

        target = sqlite_path(db.url)
        revision = check_fleet_file(file)
        db.close()  # our own pooled connections, if any, must not hold the old pages
        kept = None
        if target.exists():
            kept = target.with_name(f"{target.stem}.before-restore-{utcnow():%Y%m%d-%H%M%S}{target.suffix}")
            copy_database(target, kept)
        with sqlite3.connect(f"file:{file}?mode=ro", uri=True) as reader, sqlite3.connect(target) as writer:
            reader.backup(writer)  # one step: other connections see the old database or the new, never a mix
        reader.close()
        writer.close()
        if kept:
            click.echo(f"kept the database as it was in {kept}")
        click.echo(f"restored {target} from {file} (revision {revision})")
        if revision != migrate.head_revision():
            click.echo(f"the backup is at revision {revision}; run 'fleet init' to upgrade it to "
                       f"{migrate.head_revision()}")



def copy_all_rows(source, target) -> dict[str, int]:
    """Copy every fleet table from engine ``source`` into the empty, migrated engine ``target`` (same revision),
    parents before children, in one transaction; then move PostgreSQL's id sequences past the copied ids."""
    from sqlalchemy import MetaData, func, insert, select, text

    metadata = MetaData()
    metadata.reflect(source)
    copied = {}
    with source.connect() as reader, target.begin() as writer:
        for table in metadata.sorted_tables:
            if table.name == "alembic_version":
                continue
            rows = [dict(row._mapping) for row in reader.execute(select(table))]
            if writer.execute(select(func.count()).select_from(text(f'"{table.name}"'))).scalar():
                raise click.ClickException(f"the target already holds {table.name} rows; copy into an empty "
                                           "database that 'fleet init' created")
            if rows:
                writer.execute(insert(table), rows)
            copied[table.name] = len(rows)
            if writer.dialect.name == "postgresql" and "id" in table.c and rows:
                writer.execute(text(f"SELECT setval(pg_get_serial_sequence('\"{table.name}\"', 'id'), "
                                    f'(SELECT max(id) FROM "{table.name}"))'))
    return copied


def register_copy(group: click.Group) -> None:
    @group.command("copy")
    @click.argument("target_url", metavar="URL")
    @click.pass_obj
    def copy(db, target_url: str) -> None:
        """Copy every row of this database into the empty database at URL (e.g. to move to PostgreSQL)."""
        from sqlalchemy.engine import make_url

        from fleet.db import migrate
        from fleet.db.engine import make_engine

        db.require_current()
        target = make_engine(target_url)
        try:
            if migrate.current_revision(target) is None:
                migrate.upgrade(target)
            if migrate.current_revision(target) != migrate.current_revision(db.engine):
                raise click.ClickException("the target is at another revision; run 'fleet init' on both first")
            copied = copy_all_rows(db.engine, target)
        finally:
            target.dispose()
        click.echo(f"copied {sum(copied.values())} rows of {len(copied)} tables to "
                   f"{make_url(target_url).render_as_string(hide_password=True)}")
