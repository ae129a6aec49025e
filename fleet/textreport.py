"""Plain-text tables for the terminal: the service list as `fleet analyze` prints it."""

import textwrap

from fleet.horizon import USEFUL_YEARS, date_text, hours_text
from fleet.safety import CHECK_NOW_CAUTION, calls_for_work
from fleet.status_words import STATUS_LABELS

# The limit a forecast runs to, as a screen writes it (the JSON keeps the field's key).
LIMIT_SHORT = {"eta_v": "η_v", "case_drain": "case drain"}


def _num(value, fmt: str, empty: str = "-") -> str:
    return empty if value is None else format(value, fmt)


def efficiency(value, empty: str = "-") -> str:
    """Volumetric efficiency (a fraction in the data) as every report writes it: '78.0 %'."""
    return empty if value is None else f"{100 * value:.1f} %"


def percent_points(value, empty: str = "-") -> str:
    """A fraction lost, in percent with two decimals: '0.91 %'."""
    return empty if value is None else f"{100 * value:.2f} %"


def _hours(record: dict) -> str:
    """Hours to the limit with bounds, or 'beyond 10 years' (fleet.horizon) for a forecast that far ahead."""
    if record.get("crossed_date"):
        return "past: crossed around"
    hours = record.get("hours_to_limit")
    text = hours_text(hours, record.get("limit_date"), empty="-", unit="")
    if hours is None or not text[:1].isdigit():
        return text
    low, high = record.get("hours_to_limit_low"), record.get("hours_to_limit_high")
    if low is not None:
        text += f" ({low:,.0f}-{'open' if high is None else format(high, ',.0f')})"
    return text


def _date(record: dict) -> str:
    """The limit date; for a pump past its limit, when its trend crossed it (its last reading's date says little)."""
    crossed = record.get("crossed_date")
    return f"~{crossed}" if crossed else date_text(record.get("limit_date"), empty="-")


def service_table(records: list[dict], width: int = 110) -> str:
    """One line per pump, most urgent first, with its first reason wrapped beneath."""
    header = f"{'#':>3}  {'pump':<14} {'status':<11} {'η_v,ref':>8} {'lost/1000h':>10} {'drain%':>6} " \
             f"{'hours to limit (bounds)':<26} {'date':<15} {'limit':<10}"
    lines = [header, "-" * len(header)]
    for record in records:
        # A pump past its limit: the limit its trend crossed first, as the date beside it is that crossing's.
        limit = record.get("crossed_limit") if record.get("crossed_date") else record.get("governing_limit")
        lines.append(
            f"{record.get('rank') or '':>3}  {str(record['pump'])[:14]:<14} "
            f"{STATUS_LABELS.get(record['status'], record['status']):<11} "
            f"{efficiency(record.get('eta_v_ref')):>8} {percent_points(record.get('eta_v_decline_per_1000h')):>10} "
            f"{_num(record.get('drain_pct_ref'), '.1f'):>6} {_hours(record):<26} "
            f"{_date(record):<15} {LIMIT_SHORT.get(limit, limit) or '-':<10}"
        )
        for reason in record.get("reasons") or []:
            lines.extend(textwrap.wrap(reason, width=width, initial_indent="       - ",
                                       subsequent_indent="         "))
        if calls_for_work(record.get("reasons")):
            lines.extend(textwrap.wrap(f"! {CHECK_NOW_CAUTION}", width=width, initial_indent="         ",
                                       subsequent_indent="           "))
    counts: dict[str, int] = {}
    for record in records:
        counts[record["status"]] = counts.get(record["status"], 0) + 1
    summary = ", ".join(f"{n} {STATUS_LABELS.get(s, s).lower()}" for s, n in counts.items())
    lines.append("")
    lines.extend(textwrap.wrap(
        f"{len(records)} pump(s): {summary}. η_v,ref: volumetric efficiency at reference conditions; lost/1000h: "
        f"its loss per 1000 running hours; drain%: case drain, % of max flow. Bounds are {_confidence(records)} "
        f"intervals; hours are running hours; a forecast more than {USEFUL_YEARS} years ahead is shown as such "
        "(--json keeps its figures).", width=width))
    return "\n".join(lines)


def _confidence(records: list[dict]) -> str:
    levels = {r.get("confidence") for r in records if r.get("confidence")}
    return "/".join(f"{level:.0%}" for level in sorted(levels)) or "90%"
