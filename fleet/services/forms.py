"""Form plumbing shared by the register and planning pages: typed fields, one-row import tables, problems by field.

Forms that write a kind the importer knows build a one-row table (headers carry the chosen unit, e.g.
``displacement [in3/rev]``) and go through fleet.services.importing, so a form and a CSV file are checked alike.
"""

from dataclasses import dataclass, field
from datetime import datetime, timedelta

import pandas as pd

from fleet import units
from fleet.io.parse import ImportRejected
from fleet.timeutil import utcnow

UNIT_SUFFIX = "__unit"  # form key of a field's unit choice: 'displacement__unit'
FUTURE_TOLERANCE = timedelta(hours=1)  # same slack as the importer: handheld clocks drift


class FormRejected(Exception):
    """A form with problems, each under the field it concerns ('' for the form as a whole). Nothing was written."""

    def __init__(self, errors: dict[str, list[str]]):
        self.errors = {name: list(reasons) for name, reasons in errors.items() if reasons}
        super().__init__(f"{sum(len(v) for v in self.errors.values())} problem(s); nothing was saved")

    def messages(self) -> list[str]:
        return [f"{name}: {reason}" if name else reason for name, reasons in self.errors.items()
                for reason in reasons]


@dataclass(frozen=True)
class Field:
    """One input of a form. quantity: a fleet.units quantity, which adds a unit choice beside the number."""

    name: str
    label: str
    type: str = "text"  # text | number | datetime | date | select | checkbox | textarea
    required: bool = False
    quantity: str | None = None
    help: str = ""
    options: tuple[tuple[str, str], ...] = field(default_factory=tuple)  # (value, label) for selects
    readonly: bool = False

    def as_dict(self, values: dict, errors: dict) -> dict:
        choices = list(units.CHOICES.get(self.quantity, ())) if self.quantity else []
        return {
            "name": self.name, "label": self.label, "type": self.type, "required": self.required,
            "help": self.help, "options": [list(o) for o in self.options], "readonly": self.readonly,
            "units": choices, "unit": values.get(self.name + UNIT_SUFFIX) or (choices[0] if choices else None),
            "value": values.get(self.name, ""), "errors": errors.get(self.name, []),
        }


class Collector:
    """Gathers problems while a form's fields are read, so every problem is reported at once."""

    def __init__(self, values: dict):
        self.values = values
        self.errors: dict[str, list[str]] = {}

    def add(self, name: str, reason: str) -> None:
        self.errors.setdefault(name, []).append(reason)

    def raise_if_any(self) -> None:
        if self.errors:
            raise FormRejected(self.errors)

    def text(self, name: str, required: bool = False) -> str | None:
        value = str(self.values.get(name) or "").strip()
        if not value:
            if required:
                self.add(name, "a value is required")
            return None
        return value

    def number(self, name: str, required: bool = False, quantity: str | None = None, low: float | None = None,
               high: float | None = None, positive: bool = False, integer: bool = False) -> float | None:
        text = self.text(name, required)
        if text is None:
            return None
        try:
            value = float(text)
        except ValueError:
            self.add(name, f"'{text}' is not a number")
            return None
        if quantity:
            try:
                value = units.convert_one(value, self.values.get(name + UNIT_SUFFIX) or None, quantity)
            except units.UnitError as exc:
                self.add(name, str(exc))
                return None
        if positive and value <= 0:
            self.add(name, f"{text} must be above zero")
        elif low is not None and value < low:
            self.add(name, f"{text} is below the lowest allowed value ({low:g})")
        elif high is not None and value > high:
            self.add(name, f"{text} is above the highest allowed value ({high:g})")
        elif integer and value != int(value):
            self.add(name, f"{text} must be a whole number")
        return value

    def moment(self, name: str, required: bool = False, not_future: bool = False,
               now: datetime | None = None) -> datetime | None:
        text = self.text(name, required)
        if text is None:
            return None
        try:
            stamp = datetime.fromisoformat(text.replace(" ", "T") if len(text) > 10 else text)
        except ValueError:
            self.add(name, f"'{text}' is not a date (write YYYY-MM-DD or YYYY-MM-DD HH:MM)")
            return None
        if stamp.tzinfo is not None:
            stamp = stamp.astimezone(tz=None).replace(tzinfo=None)
        if not_future and stamp > (now or utcnow()) + FUTURE_TOLERANCE:
            self.add(name, f"{stamp:%Y-%m-%d %H:%M} is in the future")
        return stamp

    def choice(self, name: str, allowed, required: bool = False) -> str | None:
        text = self.text(name, required)
        if text is not None and text not in allowed:
            self.add(name, f"'{text}' is not one of the choices")
            return None
        return text


def one_row_table(values: dict, columns: list[str], quantities: dict[str, str] | None = None) -> pd.DataFrame:
    """A one-row table of text cells for the importer; a column with a chosen unit gets it in its header."""
    quantities = quantities or {}
    headers, cells = [], []
    for name in columns:
        unit = values.get(name + UNIT_SUFFIX) if name in quantities else None
        headers.append(f"{name} [{unit}]" if unit else name)
        value = values.get(name)
        cells.append("" if value is None else str(value).strip())
    return pd.DataFrame([cells], columns=headers, dtype=str)


def problems_by_field(rejected: ImportRejected) -> FormRejected:
    """The importer's row problems of a one-row table, filed under the form's field names."""
    errors: dict[str, list[str]] = {}
    for problem in rejected.problems:
        try:
            name, _unit = units.parse_header(problem.column)
        except units.UnitError:
            name = problem.column
        errors.setdefault(name, []).append(problem.reason)
    return FormRejected(errors)
