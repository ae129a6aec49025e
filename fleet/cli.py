"""The fleet command: set up the database, move CSV files in and out, analyse, serve the dashboard."""

# Only click and light fleet modules load here: `fleet --help` must start at once. Each command imports the
# heavy layers it needs (SQLAlchemy, Alembic, pandas, the services) in its own body; a test checks this.
import importlib
import json
import sys
from functools import cached_property
from pathlib import Path

import click

from fleet.io.columns import KINDS


class Database:
    """The URL in use; its engine and session factory open the first time a command asks for them."""

    def __init__(self, url: str | None = None):
        self.given_url = url

    @cached_property
    def url(self) -> str:
        from fleet.db.engine import database_url

        return database_url(self.given_url)

    @cached_property
    def engine(self):
        from fleet.db.engine import make_engine

        return make_engine(self.url)

    @cached_property
    def sessions(self):
        from fleet.db.engine import make_session_factory

        return make_session_factory(self.engine)

    def close(self) -> None:
        """Close pooled connections, if the command opened any."""
        if "engine" in self.__dict__:
            self.engine.dispose()

    def require_current(self) -> None:
        from fleet.db import migrate

        current, head = migrate.current_revision(self.engine), migrate.head_revision()
        if current != head:
            state = "is empty" if current is None else f"is at revision {current}, the newest is {head}"
            raise click.ClickException(f"the database {state}; run 'fleet init' first")

    def require_up_to_date(self) -> None:
        """As require_current, then bring every stale analysis up to date: a command that shows stored figures
        never shows stale ones (a write whose process died before its refresh leaves them stale)."""
        from fleet.services.analysis import bring_up_to_date

        self.require_current()
        bring_up_to_date(self.sessions)


def _safe_url(url: str) -> str:
    """The URL without its password, for messages."""
    from sqlalchemy.engine import make_url

    return make_url(url).render_as_string(hide_password=True)


@click.group(help=__doc__)
@click.option("--database", "url", envvar="FLEET_DATABASE_URL", metavar="URL",
              help="SQLAlchemy URL (default: env FLEET_DATABASE_URL, else ./fleet.sqlite)")
@click.pass_context
def main(ctx: click.Context, url: str | None) -> None:
    ctx.obj = Database(url)
    ctx.call_on_close(ctx.obj.close)  # close pooled connections when the command ends


@main.command()
@click.pass_obj
def init(db: Database) -> None:
    """Create or upgrade the database to the newest migration."""
    from fleet.db import migrate
    from fleet.services.analysis import bring_up_to_date
    from fleet.services.register.records import ensure_limit_defaults
    from fleet.services.writes import perform

    before = migrate.current_revision(db.engine)
    migrate.upgrade(db.engine)
    added = perform(db.sessions, ensure_limit_defaults).value
    after = migrate.current_revision(db.engine)
    verb = "created" if before is None else ("upgraded" if before != after else "already current")
    click.echo(f"database {verb} at revision {after}: {_safe_url(db.url)}")
    if added:
        click.echo(f"stored default limits for {added} pump kinds")
    summary = bring_up_to_date(db.sessions)  # an upgrade can leave stored analyses older than their data
    if summary:
        click.echo(summary.describe())


@main.command("import")
@click.argument("kind", metavar="KIND", type=click.Choice(list(KINDS)))
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--no-analysis", is_flag=True, help="leave the analysis of the pumps touched marked stale, for the next "
              "read or 'fleet analyze' (a bulk load in several files)")
@click.pass_obj
def import_(db: Database, kind: str, file: Path, no_analysis: bool) -> None:
    """Import a CSV or .xlsx file of KIND, whole or not at all.

    KIND: sites, pumps, installations, readings, flowtests, samples or events.

    Headers may carry a unit in brackets, e.g. 'outlet_flow [gal/min]'. A FILE ending in .xlsx is read as a
    spreadsheet (its first sheet, the same headers). On any bad row nothing is written and every problem is listed
    with its row (the header is row 1), column and reason, and in a spreadsheet its cell (e.g. B7).
    """
    from fleet.io.parse import ImportRejected
    from fleet.services.transfer.importing import import_file
    from fleet.services.writes import perform

    db.require_current()
    try:
        outcome = perform(db.sessions, lambda session: import_file(session, kind, file), refresh=not no_analysis)
    except ImportRejected as rejected:
        click.echo(f"{file}: {len(rejected.problems)} problem(s); nothing was imported.", err=True)
        click.echo(rejected.report(), err=True)
        sys.exit(1)
    click.echo(outcome.value.summary())
    for line in outcome.value.doubt_lines():
        click.echo(line)
    if outcome.refresh:
        click.echo(outcome.describe())
    elif no_analysis and outcome.pumps:
        click.echo(f"the analysis of {len(outcome.pumps)} pump(s) is marked stale; the next read or "
                   "'fleet analyze' brings it up to date")


@main.command("export")
@click.argument("kind", metavar="KIND", type=click.Choice(list(KINDS)))
@click.argument("file", type=click.Path(dir_okay=False, allow_dash=True))
@click.option("--units", "unit_mode", type=click.Choice(["canonical", "site"]), default="canonical",
              show_default=True, help="'site': pressure, flow and temperature in the units of the rows' site")
@click.option("--site", default=None, help="only the rows of this site")
@click.pass_obj
def export(db: Database, kind: str, file: str, unit_mode: str, site: str | None) -> None:
    """Write KIND to FILE as CSV (canonical units in the headers unless --units site; times in each row's site's
    local time with the offset), as an .xlsx spreadsheet when FILE ends in .xlsx, or as CSV to standard output for
    '-'. Text that a spreadsheet would run as a formula gets a leading quote.

    KIND: sites, pumps, installations, readings, flowtests, samples or events."""
    from fleet.io.files import is_xlsx_path
    from fleet.services.transfer.exporting import ExportError, export_csv, export_xlsx

    db.require_current()
    with db.sessions() as session:
        try:
            if file != "-" and is_xlsx_path(file):
                content, rows = export_xlsx(session, kind, unit_mode, site)
            else:
                content, rows = export_csv(session, kind, unit_mode, site)
        except ExportError as error:
            raise click.ClickException(str(error)) from None
    if file == "-":
        click.echo(content, nl=False)
        return
    with open(file, "wb") as out:
        out.write(content if isinstance(content, bytes) else content.encode("utf-8"))
    click.echo(f"{kind}: {rows} row(s) written to {file}")


@main.command()
@click.option("--json", "as_json", is_flag=True, help="print a JSON array, one object per pump")
@click.option("--pump", "pumps", multiple=True, help="only these pumps (repeatable); default the whole fleet")
@click.option("--stored", is_flag=True, help="print the stored results without recomputing")
@click.option("--workers", type=click.IntRange(min=1), envvar="FLEET_ANALYSIS_WORKERS", show_envvar=True,
              help="processes analysing the fleet's parts at once (default: one per CPU core; 1: in this process)")
@click.pass_obj
def analyze(db: Database, as_json: bool, pumps: tuple[str, ...], stored: bool, workers: int | None) -> None:
    """Analyse the fleet (or some pumps), store the results and print them, most urgent first."""
    from fleet.services.analysis import analysis_records, bring_up_to_date, pump_ids_for, reanalyse
    from fleet.services.analysis.parallel import worker_count
    from fleet.textreport import service_table

    db.require_current()
    with db.sessions() as session:
        ids = pump_ids_for(session, pumps) if pumps else None
    if stored:
        bring_up_to_date(db.sessions)  # what a write left stale is brought up to date, never shown stale
    else:
        reanalyse(db.sessions, pump_ids=ids, progress=None if as_json else _progress_bar(),
                  workers=worker_count(workers))
    with db.sessions() as session:
        records = analysis_records(session, pump_ids=ids)
    if as_json:
        click.echo(json.dumps(records, indent=2, ensure_ascii=False))
    else:
        click.echo(service_table(records))


def _progress_bar():
    """A progress callback for big fleets, drawn on stderr so piped output stays clean."""
    state = {}

    def report(done: int, total: int, label: str) -> None:
        if total < 500:
            return
        if "bar" not in state:
            state["bar"] = click.progressbar(length=total, label=label, file=sys.stderr)
            state["bar"].__enter__()
            state["done"] = 0
        state["bar"].update(done - state["done"])
        state["done"] = done
        if done >= total:
            state.pop("bar").__exit__(None, None, None)

    return report


@main.command()
@click.option("--host", default="127.0.0.1", show_default=True, help="address to listen on (0.0.0.0: all)")
@click.option("--port", default=8000, show_default=True, type=int)
@click.option("--threads", default=8, show_default=True, type=int)
@click.pass_obj
def serve(db: Database, host: str, port: int, threads: int) -> None:
    """Serve the dashboard with a production WSGI server (waitress); first send what waits in the outbox."""
    db.require_up_to_date()
    _send_waiting_mail(db)
    _serve(db, host, port, threads)


def _send_waiting_mail(db: Database) -> None:
    """Mail left in the outbox by a failed send goes now (through the unit of work, which sends after it)."""
    from fleet.services.mail.outbox import make_due
    from fleet.services.mail.settings import mail_on
    from fleet.services.writes import perform

    if mail_on():
        delivery = perform(db.sessions, make_due).mail
        if delivery:
            click.echo(f"outbox: {delivery.describe()}")


def _serve(db: Database, host: str, port: int, threads: int) -> None:
    from waitress import serve as waitress_serve

    from fleet.web import create_app

    app = create_app({"DATABASE_URL": db.url})
    click.echo(f"fleet dashboard on http://{host}:{port}/  (database {_safe_url(db.url)}; Ctrl+C stops)")
    waitress_serve(app, host=host, port=port, threads=threads)


@main.command()
@click.option("--no-serve", is_flag=True, help="build the demo database and stop")
@click.option("--seed", default=2026, show_default=True, type=int, help="random seed of the invented plant")
@click.option("--rebuild", is_flag=True, help="wipe the database and build the demo again")
@click.option("--host", default="127.0.0.1", show_default=True)
@click.option("--port", default=8000, show_default=True, type=int)
@click.pass_obj
def demo(db: Database, no_serve: bool, seed: int, rebuild: bool, host: str, port: int) -> None:
    """Build an invented demo plant in the database and serve the dashboard."""
    from fleet.db import migrate
    from seed_demo import build_demo, demo_present, password_box

    if rebuild:
        migrate.downgrade_to_empty(db.engine)
    migrate.upgrade(db.engine)
    with db.sessions() as session:
        present = demo_present(session)
    if present and not rebuild:
        click.echo("the database already holds data; serving it as it is (use --rebuild to start again)")
    else:
        with db.sessions.begin() as session:
            built = build_demo(session, seed=seed, echo=click.echo)
        # Printed once the users are committed, in a box of their own below the import lines.
        click.echo(f"{built.summary}\n\n{password_box(built.users, None if no_serve else f'http://{host}:{port}/')}\n")
    if not no_serve:
        _serve(db, host, port, threads=8)


# Subcommands that live in their own modules (fleet/commands/*.py), each with ``register(group)``.
COMMAND_MODULES: tuple[str, ...] = (
    "fleet.commands.users",
    "fleet.commands.jobs",
    "fleet.commands.backup",
    "fleet.commands.mail",
    "fleet.commands.forecasts",
    "fleet.commands.readings",
)
for _module in COMMAND_MODULES:
    importlib.import_module(_module).register(main)


if __name__ == "__main__":  # pragma: no cover
    main()
