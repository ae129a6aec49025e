"""Template filters: numbers and times as people on a plant floor read them."""

from datetime import datetime

from flask import Flask

from fleet import safety, units
from fleet.horizon import USEFUL_YEARS, date_text, hours_text, is_beyond
from fleet.io.localtime import offset_text
from fleet.status_words import STATUS_LABELS, STATUS_METER
from fleet.timeutil import utcnow


def number(value, digits: int = 1, empty: str = "–") -> str:
    if value is None:
        return empty
    return f"{value:,.{digits}f}"


def percent(value, digits: int = 1, empty: str = "–") -> str:
    return empty if value is None else f"{100 * value:.{digits}f} %"


def efficiency(value, empty: str = "–") -> str:
    """Volumetric efficiency (a fraction in the data) as every page writes it: a percentage, one decimal."""
    return percent(value, 1, empty)


def money(value, currency: str | None, digits: int = 0, empty: str = "–") -> str:
    """A cost with its site's currency: '12,400 EUR'; a cost of no known site shows the number alone."""
    if value is None:
        return empty
    return f"{number(value, digits)} {currency}" if currency else number(value, digits)


LIMIT_NAMES = {"eta_v": "η_v", "case_drain": "case drain"}


def limit_name(value, empty: str = "–") -> str:
    """The governing limit as pages name it: 'η_v' or 'case drain'."""
    return LIMIT_NAMES.get(value, value) if value else empty


def age(value, now: datetime | None = None) -> str:
    """'3 d ago' from an ISO time or datetime."""
    if not value:
        return "never"
    moment = datetime.fromisoformat(value) if isinstance(value, str) else value
    days = ((now or utcnow()) - moment).total_seconds() / 86400
    if days < 1:
        return "today"
    return f"{days:.0f} d ago"


def forecast_date(value, empty: str = "–") -> str:
    """A forecast date, or 'beyond 10 years' (fleet.horizon)."""
    return date_text(value, empty=empty)


def forecast_hours(value, when=None, empty: str = "–") -> str:
    """Running hours to a limit, or 'beyond 10 years' when `when` (their date) lies that far (fleet.horizon)."""
    return hours_text(value, when, empty=empty)


def beyond(value, hours=None) -> bool:
    """Jinja test: a forecast date (or, without one, its hours) beyond the useful horizon (fleet.horizon)."""
    return is_beyond(value, hours)


def unit(value) -> str:
    """A unit as people write it: '°C' for degC, 'US gal/min' for gal/min (fleet.units.shown)."""
    return units.shown(value)


def in_unit(value, quantity: str, unit_text: str, digits: int = 1, empty: str = "–") -> str:
    """A canonical value shown in a site's unit, the number only: 3000 psi for 206.8 bar (fleet.units, pint)."""
    if value is None:
        return empty
    return number(float(units.from_canonical([value], quantity, unit_text)[0]), digits, empty)


def local_time(value, empty: str = "") -> str:
    """An ISO 8601 time with its offset ('2026-01-15T08:00-06:00') as pages write it: '2026-01-15 08:00 −06:00'."""
    if not value:
        return empty
    moment = datetime.fromisoformat(value) if isinstance(value, str) else value
    if moment.tzinfo is None:
        return f"{moment:%Y-%m-%d %H:%M} UTC"
    return f"{moment:%Y-%m-%d %H:%M} {offset_text(moment.utcoffset()).replace('-', '−')}"


def init_app(app: Flask) -> None:
    app.add_template_filter(local_time)
    app.add_template_filter(in_unit)
    app.add_template_filter(unit)
    app.add_template_filter(number)
    app.add_template_filter(forecast_date)
    app.add_template_filter(forecast_hours)
    app.add_template_test(beyond)
    app.add_template_global(USEFUL_YEARS, "USEFUL_YEARS")
    app.add_template_filter(percent)
    app.add_template_filter(age)
    app.add_template_filter(efficiency)
    app.add_template_filter(money)
    app.add_template_filter(limit_name)
    app.add_template_global(STATUS_LABELS, "STATUS_LABELS")
    app.add_template_global(STATUS_METER, "STATUS_METER")
    cautions = {"CAUTION_TITLE": safety.CAUTION_TITLE, "CAUTIONS": safety.CAUTIONS,
                "RUNNING_TITLE": safety.RUNNING_TITLE, "RUNNING_CAUTIONS": safety.RUNNING_CAUTIONS,
                "RUNNING_REMINDER": safety.RUNNING_REMINDER,
                "SAMPLING_CAUTIONS": safety.SAMPLING_CAUTIONS, "CHECK_NOW_CAUTION": safety.CHECK_NOW_CAUTION}
    for name, text in cautions.items():
        app.add_template_global(text, name)
    app.add_template_global(safety.calls_for_work, "calls_for_work")
