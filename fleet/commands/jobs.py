"""The three jobs at a terminal: `fleet round` (log readings pump by pump), `fleet review` (the week's changes)
and `fleet plan` (forecast limit dates against shutdown windows). Each reads the same data functions as the pages."""

import json
import textwrap

import click

from fleet.safety import CHECK_NOW_CAUTION, RUNNING_CAUTIONS, RUNNING_TITLE, calls_for_work, caution_text

WIDTH = 100


def _wrap(text: str, indent: str = "      ") -> str:
    return "\n".join(textwrap.wrap(text, width=WIDTH, initial_indent=indent, subsequent_indent=indent + "  "))


def _label(status: str | None) -> str:
    from fleet.status_words import STATUS_LABELS

    return STATUS_LABELS.get(status, status or "-")


def _num(value, fmt: str = ",.0f", empty: str = "-") -> str:
    return empty if value is None else format(value, fmt)


# --- review ------------------------------------------------------------------------------------------------

@click.command()
@click.option("--week", "week_end", type=click.DateTime(["%Y-%m-%d"]), help="the week ending on this day "
              "(default: the last 7 days)")
@click.option("--json", "as_json", is_flag=True, help="print the review as JSON (the same data as /review.json)")
@click.option("--send", is_flag=True, help="also mail it to every user with an address who has not opted out")
@click.pass_obj
def review(db, week_end, as_json: bool, send: bool) -> None:
    """The weekly review: status changes, new reasons, limits crossed, rounds missed, late lab results, energy."""
    from fleet.services.pages.review import weekly_review

    db.require_up_to_date()
    with db.sessions() as session:
        data = weekly_review(session, week_end.date() if week_end else None)
    text = review_text(data)
    click.echo(json.dumps(data, indent=2, ensure_ascii=False) if as_json else text)
    if send:
        _send_review(db, data, text)


def _send_review(db, data: dict, text: str) -> None:
    """Queue the review for every digest reader in one unit of work; it is sent after the commit."""
    from fleet.services.mail.outbox import queue_digest
    from fleet.services.mail.settings import mail_on
    from fleet.services.writes import perform

    if not mail_on():
        raise click.ClickException("mail is off: set FLEET_SMTP_URL to the plant's SMTP server")
    outcome = perform(db.sessions, lambda session: queue_digest(session, data, text))
    readers = outcome.value
    click.echo(f"weekly review queued for {len(readers)} reader(s): {', '.join(readers) or 'no one'}", err=True)
    if outcome.mail:
        click.echo(outcome.mail.describe(), err=True)
    if outcome.mail and outcome.mail.failed:
        raise click.ClickException("some mail was not sent; it stays in the outbox ('fleet mail send' retries)")


def review_text(data: dict) -> str:
    from fleet.textreport import efficiency

    counts, lines = data["counts"], []
    lines.append(f"Weekly review {data['week_start'].replace('T', ' ')} to {data['week_end'].replace('T', ' ')} (UTC)")
    lines.append(_wrap(" · ".join(f"{data['sections'][k]} {n}" for k, n in counts.items()), indent="  "))
    lines.append(f"\nLimits crossed this week ({counts['limit_crossed']})")
    for item in data["limits_crossed"]:
        place = f"{item.get('site')} / {item.get('machine')}"
        lines.append(f"  {item['pump']:<12} {_label(item['previous_status']):>10} -> {_label(item['status'])}  "
                     f"{item['at'][:16].replace('T', ' ')}  {place}")
    lines.append(f"\nStill past their limit ({counts['still_past_limit']})")
    for item in data["still_past_limit"]:
        since = (item.get("past_limit_since") or "before the records")[:16].replace("T", " ")
        lines.append(f"  {item['pump']:<12} flagged {since}  η_v,ref {efficiency(item.get('eta_v_ref'))}  "
                     f"({item.get('site')} / {item.get('machine')})")
    lines.append(f"\nStatus changes ({counts['status_change']})")
    for item in data["status_changes"]:
        lines.append(f"  {item['pump']:<12} {_label(item['previous_status']):>10} -> {_label(item['status']):<10} "
                     f"{item['at'][:16].replace('T', ' ')}  η_v,ref {efficiency(item.get('eta_v_ref'))}")
    lines.append(f"\nNew reasons ({counts['new_reason']})")
    for item in data["new_reasons"]:
        lines.append(f"  {item['pump']:<12} {_label(item['status']):<10} {item['at'][:16].replace('T', ' ')}")
        lines.append(_wrap(f"+ {item['reason']}"))
        if calls_for_work([item["reason"]]):
            lines.append(_wrap(f"! {CHECK_NOW_CAUTION}", indent="        "))
    totals = data["maintenance_totals"]
    cost = ", ".join(f"{_num(v)} {k}" for k, v in sorted(totals["cost"].items())) or "no cost recorded"
    lines.append(f"\nMaintenance done ({counts['maintenance']}): {cost}; {_num(totals['downtime_h'], '.1f')} h down")
    for item in data["maintenance"]:
        extra = "".join([f", {item['failure_mode']}" if item.get("failure_mode") else "",
                         f", {_num(item['cost'])} {item.get('currency') or ''}".rstrip() if item.get("cost") is not None
                         else "",
                         f", {_num(item['downtime_h'], '.1f')} h down" if item.get("downtime_h") is not None else ""])
        lines.append(f"  {item['pump']:<12} {item['date'][:10]} {item['kind']}{extra}")
    lines.append(f"\nPumps installed or removed ({counts['installation']})")
    for item in data["installations"]:
        lines.append(f"  {item['pump']:<12} {item['what']:<9} {item['at'][:16].replace('T', ' ')}  "
                     f"{item['site']} / {item['machine']} / {item['position']}")
    lines.append(f"\nReadings corrected ({counts['reading_corrected']})")
    for item in data["readings_corrected"]:
        changed = "; ".join(f"{c['field']} {c['before']} -> {c['after']}" for c in item["changes"])
        when = item["at"][:16].replace("T", " ")
        why = f"; reason: {item['reason']}" if item["reason"] else ""
        lines.append(_wrap(f"{item['pump']:<12} reading of {item['taken_at']}, corrected {when} by {item['by']}: "
                           f"{changed}{why}", indent="  "))
    lines.append(f"\nRounds missed ({counts['round_missed']})")
    for item in data["rounds_missed"]:
        lines.append(f"  {item['pump']:<12} last reading {str(item['last_reading_at'])[:10]}, due "
                     f"{str(item['due_at'])[:10]}, {_num(item['days_overdue'])} d overdue  "
                     f"({item.get('site')} / {item.get('machine')})")
    lines.append(f"\nLab results late ({counts['lab_late']})")
    for item in data["lab_late"]:
        lines.append(f"  {item.get('site')} / {item.get('machine')}: sampled {str(item['sampled_at'])[:10]}, "
                     f"waiting {item['days_waiting']} days; pumps {', '.join(item.get('pumps') or [])}")
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
             caution_text(), ""]
    if data["at_risk"]:
        lines.append(_wrap(f"At risk before the next window: {', '.join(data['at_risk'])}.", indent=""))
    from fleet.horizon import date_text
    from fleet.textreport import LIMIT_SHORT

    lines.append(f"\nPumps inside the horizon ({len(data['pumps'])}); dates are expected (early - late bound),")
    lines.append("or for a limit already passed, when the trend crossed it (crossed ~)")
    for item in data["pumps"]:
        cost = item.get("overhaul_cost")
        payback = item.get("overhaul_payback_years")
        if item.get("crossed_date"):  # past its limit: when its trend crossed it, not its last reading's date
            when = (f"crossed ~{item['crossed_date']} ({item.get('crossed_date_low') or '-'} - "
                    f"{item.get('crossed_date_high') or 'open'})")
            limit = item.get("crossed_limit")
        else:
            when = (f"{date_text(item.get('limit_date'), data['today'], '-')} "
                    f"({date_text(item.get('limit_date_low'), data['today'], '-')} - "
                    f"{date_text(item.get('limit_date_high'), data['today'], 'open')})")
            limit = item.get("governing_limit")
        lines.append(f"  {item['pump']:<10} {_label(item['status']):<11} {LIMIT_SHORT.get(limit, limit or '-'):<11}"
                     f"{when}")
        extra = [item.get("window_label") or data["fit_words"].get(item.get("fit"), item.get("fit") or "")]
        if cost is not None:
            extra.append(f"overhaul {cost:,.0f} {item.get('currency') or ''}".rstrip())
        if payback is not None:
            extra.append(f"pays back in {payback:.1f} years")
        lines.append(_wrap("; ".join(e for e in extra if e), indent="             "))
    if data.get("without_forecast"):
        lines.append(f"\nPumps the plan cannot place ({len(data['without_forecast'])}): too little data for a trend "
                     "of their own")
        for item in data["without_forecast"]:
            flag = f" The last reading: {item['last_flag']}." if item.get("last_flag") else ""
            lines.append(f"  {item['pump']:<10} {_label(item['status'])}")
            lines.append(_wrap(f"{item['why']}{flag}", indent="             "))
    lines.append(f"\nShutdown windows ({len(data['windows'])})")
    for window in data["windows"]:
        note = (f"  {window['note']}" if window.get("note") else "") + ("  (past)" if window.get("past") else "")
        span = f"{window['starts_at'][:10]} to {window['ends_at'][:10]}"
        lines.append(f"  #{window['id']} {window['scope']}: {span}{note}")
    lines.append(f"\nExpected overhauls per kind in the horizon (fleet history, {data['spares_cover']:.0%} cover)")
    for kind in data["kinds"]:
        if kind.get("beta") is None:
            lines.append(f"  {kind['kind_label']:<15} {_pumps(kind['pumps'])}: {kind.get('note') or 'no fit'}")
        else:
            lines.append(f"  {kind['kind_label']:<15} {_pumps(kind['pumps'])}: beta {kind['beta']:.2f}, "
                         f"alpha {kind['alpha_hours']:,.0f} h, B10 {kind['b10_hours']:,.0f} h; expect "
                         f"{kind['expected_overhauls']:.1f}, hold {kind['spares_to_hold']} spare(s)")
    return "\n".join(lines)


def _pumps(count: int) -> str:
    return f"{count:>3} pump " if count == 1 else f"{count:>3} pumps"


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
    from fleet.services.rounds import check_reading, fields_for, label_of, reading_table, save_readings
    from fleet.services.sitelocal import of_pump
    from fleet.timeutil import utcnow

    given = _parse_units(units_given)
    db.require_current()
    with db.sessions() as session:
        name, serials = _route_pumps(session, route)
    click.echo(f"Round '{name}': {len(serials)} pump(s).\n\n{caution_text(RUNNING_TITLE, RUNNING_CAUTIONS)}\n\n"
               f"{caution_text()}\n")
    for number, serial in enumerate(serials, start=1):
        with db.sessions() as session:
            pump = pump_by_serial(session, serial)
            click.echo(f"[{number}/{len(serials)}] {serial} ({pump.kind.replace('_', ' ')})")
            # The pump's site's units unless --unit says otherwise; its decimal comma applies too.
            site = of_pump(session, pump)
            chosen = {**_site_defaults(site), **given}
            values = _ask_values(fields_for(pump), chosen)
            if values is None:
                click.echo("  skipped\n")
                continue
            while True:
                # now, with its offset: a time without one would be read in the site's zone
                table = reading_table(serial, utcnow().strftime("%Y-%m-%dT%H:%M:%S+00:00"), values, chosen,
                                      taken_by=taken_by)
                outcome = check_reading(session, pump, table)
                if outcome.problems:
                    for problem in outcome.problems:  # named by the prompt it was typed at
                        where = label_of(problem.column) or problem.column
                        click.echo(f"  problem: {where}: {problem.reason}" if where else f"  problem: {problem.reason}")
                    values = _ask_values(fields_for(pump), chosen, values)
                    if values is None:
                        break
                    continue
                for doubt in outcome.warnings:
                    click.echo(f"  check: {doubt.message}")
                    if doubt.caution:
                        click.echo(_wrap(f"! {doubt.caution}", indent="  "))
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

    quantities = {f.name: f.quantity for f in FORM_FIELDS if f.quantity}
    chosen = {}
    for item in given:
        field, _, unit = item.partition("=")
        if field not in quantities or not unit:
            raise click.BadParameter(f"{item!r}: write FIELD=UNIT with FIELD one of {', '.join(quantities)}",
                                     param_hint="--unit")
        chosen[field] = unit
    return chosen


def _site_defaults(site) -> dict[str, str]:
    """Each form field's unit: the site's for pressure, flow and temperature, canonical for the rest."""
    from fleet.services.rounds import FORM_FIELDS
    from fleet.units import CHOICES

    return {f.name: site.unit_of(f.quantity) or CHOICES[f.quantity][0] for f in FORM_FIELDS if f.quantity}


def _ask_values(fields, chosen: dict[str, str], before: dict | None = None) -> dict[str, str] | None:
    from fleet.units import shown

    values: dict[str, str] = {}
    for spec in fields:
        unit = "%" if spec.name == "stroke" else chosen.get(spec.name, "")
        prompt = f"  {spec.label}" + (f" [{shown(unit)}]" if unit and spec.name != "stroke" else "") + \
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

