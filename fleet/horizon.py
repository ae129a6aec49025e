"""How far ahead a forecast is worth a date: the one place that turns a far forecast into "beyond N years".

A wear trend extrapolated far past its readings can put a limit 388,041 running hours away, a date in 2077. No
plan is made on that, and a date so precise claims more than the trend knows. Every screen and text table (the
pump page, the service list, the plan, `fleet analyze`) therefore shows a forecast date more than USEFUL_YEARS
after today as "beyond 10 years", and its hours likewise. The JSON twins and `fleet analyze --json` keep the
numbers (they are a contract, and a program may want them).

Ten years is our choice: it is several times the hours between overhauls that pumps of every kind live (the demo's
invented fleet record: 10,000 to 18,000 h, one to six years at 8 to 22 h a day) and forty times the default
planning horizon of 26 weeks, and wear trends fitted over a service interval of one to three years say little
about a time ten years past their last reading. Light on purpose: the command line imports it.
"""

from datetime import date, datetime

from fleet.timeutil import utcnow

USEFUL_YEARS = 10
BEYOND_WORDS = f"beyond {USEFUL_YEARS} years"
# With no calendar date (no hour-meter rate), running hours beyond this many are beyond the horizon: the pump
# running round the clock, the earliest the hours could be used up.
USEFUL_HOURS = USEFUL_YEARS * 365.25 * 24.0


def _day(value) -> date | None:
    """A day from a date, a datetime (pandas' Timestamp too) or ISO text; None for none, NaT or NaN."""
    if value is None or isinstance(value, float) or value != value or value == "":
        return None
    if isinstance(value, datetime):
        return value.date()
    if isinstance(value, date):
        return value
    try:
        return date.fromisoformat(str(value)[:10])
    except ValueError:
        return None


def _today(today) -> date:
    return _day(today) or utcnow().date()


def horizon_end(today=None) -> date:
    """The last day a forecast is shown as a date: the same day USEFUL_YEARS later (29 February: the 28th)."""
    day = _today(today)
    try:
        return day.replace(year=day.year + USEFUL_YEARS)
    except ValueError:
        return day.replace(year=day.year + USEFUL_YEARS, day=28)


def is_beyond(when=None, hours=None, today=None) -> bool:
    """True when a forecast lies beyond the useful horizon: by its date when it has one, else by its hours."""
    day = _day(when)
    if day is not None:
        return day > horizon_end(today)
    return hours is not None and hours == hours and hours > USEFUL_HOURS


def date_text(when, today=None, empty: str = "–") -> str:
    """A forecast date as shown: 'YYYY-MM-DD', or 'beyond 10 years', or `empty` without one."""
    day = _day(when)
    if day is None:
        return empty
    return BEYOND_WORDS if is_beyond(day, today=today) else day.isoformat()


def hours_text(hours, when=None, today=None, empty: str = "–", unit: str = " h") -> str:
    """Running hours to a limit as shown: '1,234 h', or 'beyond 10 years' (judged by `when`, the date those hours
    are used up, when known), or `empty` without a figure."""
    if hours is None or hours != hours:
        return empty
    return BEYOND_WORDS if is_beyond(when, hours, today) else f"{hours:,.0f}{unit}"
