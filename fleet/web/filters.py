"""Template filters: numbers and times as people on a plant floor read them."""

from datetime import datetime

from flask import Flask

from fleet.horizon import USEFUL_YEARS, date_text, hours_text, is_beyond
from fleet.safety import CAUTION_TITLE, CAUTIONS
from fleet.status_words import STATUS_LABELS, STATUS_METER
from fleet.timeutil import utcnow


def number(value, digits: int = 1, empty: str = "–") -> str:
    if value is None:
        return empty
    return f"{value:,.{digits}f}"


def percent(value, digits: int = 1, empty: str = "–") -> str:
    return empty if value is None else f"{100 * value:.{digits}f} %"


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


def init_app(app: Flask) -> None:
    app.add_template_filter(number)
    app.add_template_filter(forecast_date)
    app.add_template_filter(forecast_hours)
    app.add_template_test(beyond)
    app.add_template_global(USEFUL_YEARS, "USEFUL_YEARS")
    app.add_template_filter(percent)
    app.add_template_filter(age)
    app.add_template_global(STATUS_LABELS, "STATUS_LABELS")
    app.add_template_global(STATUS_METER, "STATUS_METER")
    app.add_template_global(CAUTIONS, "CAUTIONS")
    app.add_template_global(CAUTION_TITLE, "CAUTION_TITLE")
