"""`fleet forecasts`: the forecast record at a terminal, the same data as /forecasts.json."""

import json

import click


@click.command()
@click.option("--json", "as_json", is_flag=True, help="print the record as JSON (the same data as /forecasts.json)")
@click.pass_obj
def forecasts(db, as_json: bool) -> None:
    """The forecast record: how early or late past forecasts were, and how often their band held, per pump kind."""
    from fleet.services.pages.forecasts import forecast_record_page

    db.require_up_to_date()
    with db.sessions() as session:
        data = forecast_record_page(session)
    click.echo(json.dumps(data, indent=2, ensure_ascii=False) if as_json else record_text(data))


def _num(value, fmt: str) -> str:
    return "-" if value is None else format(value, fmt)


def record_text(data: dict) -> str:
    lines = [f"Forecast record: {data['snapshots']} forecasts kept for {data['pumps_with_snapshots']} pumps"
             + (f" since {data['first_snapshot_at'][:10]}" if data["first_snapshot_at"] else "")
             + f"; {data['intervals_ended']} service interval(s) ended after forecasts were kept.", ""]
    if not data["summary"]:
        lines.append("No ended interval has a forecast from 3, 6 or 12 months before it yet.")
        return "\n".join(lines)
    header = (f"{'kind':<15} {'made before':<11} {'scored':>6} {'no limit':>8} {'median err d':>12} "
              f"{'median |err| d':>14} {'early':>6} {'late':>6} {'band held':>9}")
    lines += [header, "-" * len(header)]
    for s in data["summary"]:
        lines.append(f"{s['kind_label']:<15} {s['lead']:<11} {s['outcomes']:>6} {s['no_forecast']:>8} "
                     f"{_num(s['median_error_days'], '+,.0f'):>12} {_num(s['median_abs_error_days'], ',.0f'):>14} "
                     f"{_num(s['share_early'], '.0%'):>6} {_num(s['share_late'], '.0%'):>6} "
                     f"{_num(s['band_held'], '.0%'):>9}")
    lines.append("\nError: forecast date minus the end of the interval (+ late, - early). An interval ends when its "
                 "readings cross a limit, or with an overhaul or replacement; an overhaul before the limit makes "
                 "its forecasts look late.")
    return "\n".join(lines)


def register(group: click.Group) -> None:
    group.add_command(forecasts)
