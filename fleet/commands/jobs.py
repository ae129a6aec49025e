"""The three jobs at a terminal: `fleet round` (log readings pump by pump), `fleet review` (the week's changes)
and `fleet plan` (forecast limit dates against shutdown windows). Each reads the same data functions as the pages."""

import json
import textwrap

import click

from fleet.safety import CAUTION_TITLE, CAUTIONS

WIDTH = 100


def _wrap(text: str, indent: str = "      ") -> str:
    return "\n".join(textwrap.wrap(text, width=WIDTH, initial_indent=indent, subsequent_indent=indent + "  "))


def _label(status: str | None) -> str:
    from fleet.status_words import STATUS_LABELS

    return STATUS_LABELS.get(status, status or "-")


def _num(value, fmt: str = ",.0f", empty: str = "-") -> str:
    return empty if value is None else format(value, fmt)


def _cautions() -> str:
    return "\n".join([f"{CAUTION_TITLE}:"] + [f"  ! {line}" for line in CAUTIONS])


# --- review ------------------------------------------------------------------------------------------------

@click.command()
@click.option("--week", "week_end", type=click.DateTime(["%Y-%m-%d"]), help="the week ending on this day "
              "(default: the last 7 days)")
@click.option("--json", "as_json", is_flag=True, help="print the review as JSON (the same data as /review.json)")
@click.pass_obj
def review(db, week_end, as_json: bool) -> None:
    """The weekly review: status changes, new reasons, limits crossed, rounds missed, late lab results, energy."""
    from fleet.services.pages.review import weekly_review

    db.require_up_to_date()
    with db.sessions() as session:
        data = weekly_review(session, week_end.date() if week_end else None)
    click.echo(json.dumps(data, indent=2, ensure_ascii=False) if as_json else review_text(data))


def review_text(data: dict) -> str:
    counts, lines = data["counts"], []
    lines.append(f"Weekly review {data['week_start'].replace('T', ' ')} to {data['week_end'].replace('T', ' ')} (UTC)")
    lines.append("  " + " · ".join(f"{data['sections'][k]} {n}" for k, n in counts.items()))
    lines.append(f"\nLimits crossed ({counts['limit_crossed']})")
    for item in data["limits_crossed"]:
        place = f"{item.get('site')} / {item.get('machine')}"
        lines.append(f"  {item['pump']:<12} now {_label(item.get('status'))}  {place}")
    lines.append(f"\nStatus changes ({counts['status_change']})")
    for item in data["status_changes"]:
        lines.append(f"  {item['pump']:<12} {_label(item['previous_status']):>10} -> {_label(item['status']):<10} "
                     f"{item['at'][:16].replace('T', ' ')}  η_v,ref {_num(item.get('eta_v_ref'), '.3f')}")
        for reason in item.get("new_reasons") or []:
            lines.append(_wrap(f"+ {reason}"))
    lines.append(f"\nRounds missed ({counts['round_missed']})")
    for item in data["rounds_missed"]:
        lines.append(f"  {item['pump']:<12} last reading {str(item['last_reading_at'])[:10]}, due "
                     f"{str(item['due_at'])[:10]}, {_num(item['days_overdue'])} d overdue  "
                     f"({item.get('site')} / {item.get('machine')})")
    lines.append(f"\nLab results late ({counts['lab_late']})")
    for item in data["lab_late"]:
        lines.append(f"  {item.get('site')} / {item.get('machine')}: sampled {str(item['sampled_at'])[:10]}, "
                     f"waiting {_num(item['days_waiting'])} d; pumps {', '.join(item.get('pumps') or [])}")
    lines.append(f"\nLargest energy losses ({counts['energy_loss']})")
    for item in data["energy_losses"]:
        payback = item.get("overhaul_payback_years")
        lines.append(f"  {item['pump']:<12} {_num(item['energy_cost_per_year'])} {item.get('currency') or ''}/year "
                     f"({_num(item.get('leakage_kw'), '.2f')} kW lost to leakage)"
                     + (f", overhaul pays back in {payback:.1f} years" if payback is not None else ""))
    return "\n".join(lines)


# --- plan --------------------------------------------------------------------------------------------------

@click.command()
@click.option("--weeks", default=26, show_default=True, type=click.IntRange(1, 260), help="planning horizon")
@click.option("--json", "as_json", is_flag=True, help="print the plan as JSON (the same data as /plan.json)")
@click.pass_obj
def plan(db, weeks: int, as_json: bool) -> None:
    """The overhaul plan: forecast limit dates with bounds, shutdown windows, spares per pump kind, payback."""
    from fleet.services.pages.plan import overhaul_plan

    db.require_up_to_date()
    with db.sessions() as session:
        data = overhaul_plan(session, weeks=weeks)
    click.echo(json.dumps(data, indent=2, ensure_ascii=False) if as_json else plan_text(data))


def plan_text(data: dict) -> str:
    lines = [f"Overhaul plan: the next {data['weeks']} weeks, {data['today']} to {data['horizon_end']}", "",
             _cautions(), ""]
    if data["at_risk"]:
        lines.append(_wrap(f"At risk before the next window: {', '.join(data['at_risk'])}.", indent=""))
    from fleet.horizon import date_text

    lines.append(f"\nPumps inside the horizon ({len(data['pumps'])}); dates are expected (early - late bound)")
    for item in data["pumps"]:
        cost = item.get("overhaul_cost")
        payback = item.get("overhaul_payback_years")
        lines.append(f"  {item['pump']:<10} {_label(item['status']):<11} {str(item.get('governing_limit') or '-'):<11}"
                     f"{date_text(item.get('limit_date'), data['today'], '-')} "
                     f"({date_text(item.get('limit_date_low'), data['today'], '-')} - "
                     f"{date_text(item.get('limit_date_high'), data['today'], 'open')})")
        extra = [item.get("window_label") or data["fit_words"].get(item.get("fit"), item.get("fit") or "")]
        if cost is not None:
            extra.append(f"overhaul {cost:,.0f} {item.get('currency') or ''}".rstrip())
        if payback is not None:
            extra.append(f"pays back in {payback:.1f} years")
        lines.append(_wrap("; ".join(e for e in extra if e), indent="             "))
    lines.append(f"\nShutdown windows ({len(data['windows'])})")
    for window in data["windows"]:
        note = (f"  {window['note']}" if window.get("note") else "") + ("  (past)" if window.get("past") else "")
        span = f"{window['starts_at'][:10]} to {window['ends_at'][:10]}"
        lines.append(f"  #{window['id']} {window['scope']}: {span}{note}")
    lines.append(f"\nExpected overhauls per kind in the horizon (fleet history, {data['spares_cover']:.0%} cover)")
    for kind in data["kinds"]:
        if kind.get("beta") is None:
            lines.append(f"  {kind['kind_label']:<15} {kind['pumps']:>3} pumps: {kind.get('note') or 'no fit'}")
        else:
            lines.append(f"  {kind['kind_label']:<15} {kind['pumps']:>3} pumps: beta {kind['beta']:.2f}, "
                         f"alpha {kind['alpha_hours']:,.0f} h, B10 {kind['b10_hours']:,.0f} h; expect "
                         f"{kind['expected_overhauls']:.1f}, hold {kind['spares_to_hold']} spare(s)")
    return "\n".join(lines)


# --- round -------------------------------------------------------------------------------------------------

def _route_pumps(session, name: str) -> tuple[str, list[str]]:
    from fleet.services.rounds import route_names, route_pumps

    found = route_pumps(session, name)
    if found is None:
        raise click.BadParameter(f"no route or machine {name!r}; one of: {', '.join(route_names(session))}",
                                 param_hint="ROUTE")
    return found


@click.command("round")
@click.argument("route")
@click.option("--who", "taken_by", default="", help="your name, stored with each reading")
@click.option("--unit", "units_given", multiple=True, metavar="FIELD=UNIT",
              help="unit you read a field in, e.g. --unit outlet_pressure=psi (repeatable)")
@click.pass_obj
def round_(db, route: str, taken_by: str, units_given: tuple[str, ...]) -> None:
    """Walk ROUTE (a saved route's name or id, or a machine) and log a reading of each pump.

    Each pump is checked as the round form checks it: hard errors are asked again, unusual values are shown and
    need a yes. Each pump is saved (and re-analysed) as soon as it is confirmed, so nothing typed is lost.
    Press Enter on an optional field to leave it blank; type 'skip' at the running hours to pass a pump.
    """
    from fleet.db.queries import pump_by_serial
    from fleet.io.parse import ImportRejected
    from fleet.services.rounds import check_reading, fields_for, reading_table, save_readings
    from fleet.timeutil import utcnow

    chosen = _parse_units(units_given)
    db.require_current()
    with db.sessions() as session:
        name, serials = _route_pumps(session, route)
    click.echo(f"Round '{name}': {len(serials)} pump(s).\n\n{_cautions()}\n")
    for number, serial in enumerate(serials, start=1):
        with db.sessions() as session:
            pump = pump_by_serial(session, serial)
            click.echo(f"[{number}/{len(serials)}] {serial} ({pump.kind.replace('_', ' ')})")
            values = _ask_values(fields_for(pump), chosen)
            if values is None:
                click.echo("  skipped\n")
                continue
            while True:
                table = reading_table(serial, utcnow().strftime("%Y-%m-%d %H:%M"), values, chosen, taken_by=taken_by)
                outcome = check_reading(session, pump, table)
                if outcome.problems:
                    for problem in outcome.problems:
                        click.echo(f"  problem: {problem.column}: {problem.reason}")
                    values = _ask_values(fields_for(pump), chosen, values)
                    if values is None:
                        break
                    continue
                for doubt in outcome.warnings:
                    click.echo(f"  check: {doubt.message}")
                if outcome.warnings and not click.confirm("  Save as typed?", default=False):
                    values = _ask_values(fields_for(pump), chosen, values)
                    if values is None:
                        break
                    continue
                try:
                    saved = save_readings(db.sessions, table)
                except ImportRejected as rejected:  # stored by someone else meanwhile
                    click.echo(f"  not saved: {rejected.report()}")
                    break
                click.echo(f"  saved; {saved.describe()}\n")
                break
    click.echo("Round complete.")


def _parse_units(given: tuple[str, ...]) -> dict[str, str]:
    from fleet.services.rounds import FORM_FIELDS
    from fleet.units import CHOICES

    quantities = {f.name: f.quantity for f in FORM_FIELDS if f.quantity}
    chosen = {name: CHOICES[q][0] for name, q in quantities.items()}
    for item in given:
        field, _, unit = item.partition("=")
        if field not in quantities or not unit:
            raise click.BadParameter(f"{item!r}: write FIELD=UNIT with FIELD one of {', '.join(quantities)}",
                                     param_hint="--unit")
        chosen[field] = unit
    return chosen


def _ask_values(fields, chosen: dict[str, str], before: dict | None = None) -> dict[str, str] | None:
    values: dict[str, str] = {}
    for spec in fields:
        unit = "%" if spec.name == "stroke" else chosen.get(spec.name, "")
        prompt = f"  {spec.label}" + (f" [{unit}]" if unit and spec.name != "stroke" else "") + \
                 ("" if spec.required else " (optional)")
        default = (before or {}).get(spec.name, "")
        # A required field without an earlier answer has no default, so click asks until it gets one.
        answer = click.prompt(prompt, default=default if (default or not spec.required) else None,
                              show_default=bool(default)).strip()
        if spec.name == "hours" and answer.lower() == "skip":
            return None
        values[spec.name] = answer
    return values


def register(group: click.Group) -> None:
    for command in (round_, review, plan):
        group.add_command(command)

