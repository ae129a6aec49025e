"""Form plumbing shared by the register and planning pages: typed fields, one-row import tables, problems by field.

One set of rules for every door: forms that write a kind the importer knows build a one-row table (headers carry
the chosen unit, e.g. ``displacement [in3/rev]``) and go through fleet.services.transfer.importing; the others read each
field with ``Collector``, which parses by the same column declarations, and apply the same cross-field rules
(fleet.io.rules). So a form and a CSV file refuse the same values in the same words.
"""

from dataclasses import dataclass, field

import pandas as pd

from fleet import units
from fleet.io.columns import FORM_KINDS, KINDS
from fleet.io.parse import ImportRejected, parse_cell

UNIT_SUFFIX = "__unit"  # form key of a field's unit choice: 'displacement__unit'


class FormRejected(Exception):
    """A form with problems, each under the field it concerns ('' for the form as a whole). Nothing was written."""

    def __init__(self, errors: dict[str, list[str]]):
        self.errors = {name: list(reasons) for name, reasons in errors.items() if reasons}
        super().__init__(f"{sum(len(v) for v in self.errors.values())} problem(s); nothing was saved")


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
    """Reads a form's fields by the same column declarations and parser as a CSV file (fleet.io.columns,
    fleet.io.parse), gathering every problem so all are reported at once, in the same words as an import."""

    def __init__(self, values: dict, kind: str, zone: str | None = None, decimal_comma: bool = False):
        self.values = values
        # The site's conventions for times without an offset and for a decimal comma (fleet.services.sitelocal);
        # a form may set them once it knows its site.
        self.zone, self.decimal_comma = zone, decimal_comma
        self.specs = {column.name: column for column in (KINDS.get(kind) or FORM_KINDS[kind])}
        self.parsed: dict[str, object] = {}
        self.errors: dict[str, list[str]] = {}

    def add(self, name: str, reason: str) -> None:
        self.errors.setdefault(name, []).append(reason)

    def raise_if_any(self) -> None:
        if self.errors:
            raise FormRejected(self.errors)

    def get(self, name: str):
        """The field's value in canonical units (its unit chosen beside it), or None when blank or refused."""
        spec = self.specs[name]
        unit = (self.values.get(name + UNIT_SUFFIX) or None) if spec.quantity else None
        value, reasons = parse_cell(spec, self.values.get(name), unit, self.zone, self.decimal_comma)
        for reason in reasons:
            self.add(name, reason)
        self.parsed[name] = value
        return value

    def check(self, *rule_results) -> None:
        """File the problems of cross-field rules (fleet.io.rules, applied to ``row()``) under their fields."""
        for problems in rule_results:
            for problem in problems:
                self.add(problem.column, problem.reason)

    def row(self) -> pd.DataFrame:
        """The values read so far as a one-row table, for the rules (blank or refused values are left out)."""
        return pd.DataFrame([{k: v for k, v in self.parsed.items() if v is not None}])

    def choice(self, name: str, allowed, required: bool = False) -> str | None:
        text = str(self.values.get(name) or "").strip()
        if not text:
            if required:
                self.add(name, "a value is required")
            return None
        if text not in allowed:
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
