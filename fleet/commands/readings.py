"""`fleet reading correct`: correct a stored reading's values with a reason, as the reading's page does."""

import json
import sys

import click


@click.group()
def reading() -> None:
    """Stored readings."""


@reading.command()
@click.argument("reading_id", type=int)
@click.option("--set", "settings", multiple=True, required=True, metavar="FIELD=VALUE",
              help="a new value (repeatable): hours, outlet_pressure, speed, outlet_flow, case_drain_flow, oil_temp, "
                   "stroke (%), note; FIELD= clears an optional value")
@click.option("--unit", "units_given", multiple=True, metavar="FIELD=UNIT",
              help="the unit a value is given in, as for 'fleet round' (default: the canonical unit)")
@click.option("--reason", required=True, help="why the values were wrong (kept with the old values)")
@click.option("--by", "by", required=True, metavar="USER",
              help="the user correcting (an engineer, or the technician who took the reading, within a day)")
@click.option("--json", "as_json", is_flag=True, help="print what changed as JSON (as PATCH /api/readings/ID)")
@click.pass_obj
def correct(db, reading_id: int, settings: tuple[str, ...], units_given: tuple[str, ...], reason: str, by: str,
            as_json: bool) -> None:
    """Correct reading READING_ID (its id is on its page and in the pump's CSV): the old values stay in the audit
    trail with the reason, and the pump is analysed again. Refused, with nothing changed, when the user may not
    correct it or a value is refused as an import would refuse it."""
    from fleet.commands.jobs import _parse_units
    from fleet.db.audit import acting_as
    from fleet.services.corrections import CorrectionRefused, correct_reading
    from fleet.services.writes import perform

    values = {}
    for item in settings:
        name, sign, value = item.partition("=")
        if not sign or not name:
            raise click.BadParameter(f"{item!r}: write FIELD=VALUE", param_hint="--set")
        values[name.strip()] = value.strip()
    chosen = {name: unit for name, unit in _parse_units(units_given).items()
              if any(given.partition("=")[0] == name for given in units_given)}
    db.require_current()
    try:
        with acting_as(by):
            outcome = perform(db.sessions, lambda session: correct_reading(session, reading_id, values, reason, by,
                                                                            chosen))
    except CorrectionRefused as refused:
        click.echo(f"reading {reading_id} not corrected ({refused.status}):", err=True)
        for problem in refused.problems:
            click.echo(f"  {problem['field'] + ': ' if problem['field'] else ''}{problem['reason']}", err=True)
        sys.exit(1)
    done = outcome.value
    if as_json:
        click.echo(json.dumps({"reading": done.reading_id, "pump": done.pump, "changes": done.changes,
                               "doubts": done.doubts}, indent=2, ensure_ascii=False))
        return
    click.echo(f"reading {done.reading_id} of {done.pump} corrected:")
    for change in done.changes:
        click.echo(f"  {change['field']}: {change['before']} -> {change['after']}")
    for doubt in done.doubts:
        click.echo(f"  look again: {doubt['message']}")
    if outcome.refresh:
        click.echo(outcome.describe())


def register(group: click.Group) -> None:
    group.add_command(reading)
