"""Rules that tie one value to another or to the clock, declared once for every door.

A single value's unit, bounds and form are declared with its column (fleet.io.columns) and parsed by
fleet.io.parse. What needs two values, or the time now, is here: the CSV importer applies these rules to a whole
table, and a form to its one row, so both refuse the same things in the same words.
"""

from datetime import datetime, timedelta

import pandas as pd

from fleet.io.parse import Problem, row_numbers

# Clocks on handhelds drift: a time up to an hour ahead of the server's is still "now".
FUTURE_TOLERANCE = timedelta(hours=1)


def _problems(data: pd.DataFrame, mask: pd.Series, column: str, reason) -> list[Problem]:
    mask = mask.fillna(False).astype(bool)
    rows = data.index[mask.to_numpy()]
    return [Problem(int(row), column, reason(data.loc[index]) if callable(reason) else reason)
            for row, index in zip(row_numbers(rows), rows, strict=True)]


def oil_thins_when_hot(data: pd.DataFrame, cold: str = "viscosity_40", hot: str = "viscosity_100") -> list[Problem]:
    """An oil's viscosity at 100 degC is below its viscosity at 40 degC."""
    if not {cold, hot} <= set(data.columns):
        return []
    return _problems(data, data[hot] >= data[cold], hot, f"must be below {cold} (oil thins as it warms)")


def low_below_high(data: pd.DataFrame, low: str, high: str) -> list[Problem]:
    """A lower limit is below its upper limit (oil temperature limits)."""
    if not {low, high} <= set(data.columns):
        return []
    return _problems(data, data[low] >= data[high], low, f"must be below {high}")


def not_in_future(data: pd.DataFrame, column: str, now: datetime) -> list[Problem]:
    """A moment that has happened: no later than now, give or take a drifting clock."""
    if column not in data.columns:
        return []
    late = data[column] > pd.Timestamp(now + FUTURE_TOLERANCE)
    return _problems(data, late, column, lambda row: f"{row[column]:%Y-%m-%d %H:%M} is in the future")


def not_before(data: pd.DataFrame, later: str, earlier: str, words: str | None = None) -> list[Problem]:
    """One moment no earlier than another (a lab report after its sample, a window's end after its start)."""
    if not {later, earlier} <= set(data.columns):
        return []
    return _problems(data, data[later] < data[earlier], later, words or f"is before {earlier}")


def table_rules(kind: str, data: pd.DataFrame, now: datetime) -> list[Problem]:
    """The rules of an import of ``kind`` that need no database, over every row at once."""
    problems = []
    for column in _HAPPENED.get(kind, ()):
        problems += not_in_future(data, column, now)
    if kind == "pumps":
        problems += oil_thins_when_hot(data) + low_below_high(data, "oil_temp_min", "oil_temp_max")
    if kind == "samples":
        problems += not_before(data, "reported_at", "sampled_at")
    return problems


# The moments of each import kind that must have happened already.
_HAPPENED = {"installations": ("installed_at",), "readings": ("taken_at",), "samples": ("sampled_at",),
             "events": ("date",)}
