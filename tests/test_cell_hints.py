"""A number written with its unit in the cell ('1.5 days') is refused, with the header to write instead.

Reference: pint (through fleet.units.resolve) decides whether the words after the number are a unit of the
column's quantity; only then is the header suggested."""

import pandas as pd
import pint
import pytest

from fleet.io.columns import KINDS
from fleet.io.parse import parse_cell, parse_table


def _spec(kind: str, name: str):
    return next(c for c in KINDS[kind] if c.name == name)


@pytest.mark.parametrize("kind, name, cell, unit", [
    ("events", "downtime", "1.5 days", "days"), ("readings", "outlet_pressure", "3000psi", "psi"),
    ("readings", "oil_temp", "120 degF", "degF"),
])
def test_a_unit_in_the_cell_is_pointed_to_the_header(kind, name, cell, unit):
    pint.UnitRegistry().Quantity(1, unit)  # pint knows the unit itself
    assert parse_cell(_spec(kind, name), cell) == (None, [
        f"'{cell}' is not a number: give the number alone (a file names its unit in the column's header: "
        f"'{name} [{unit}]')"])
    # ... and the header it suggests reads the same number in that unit.
    table = pd.DataFrame({f"{name} [{unit}]": [cell.replace(unit, "").strip()]}, dtype=str)
    parsed, problems = parse_table(kind, table)
    assert not [p for p in problems if p.column == name]


@pytest.mark.parametrize("kind, name, cell", [
    ("events", "downtime", "3 apples"),  # no unit pint knows
    ("readings", "outlet_pressure", "230 L/min"),  # a unit, but of flow
    ("events", "cost", "5000 EUR"),  # a column without a unit quantity
])
def test_no_header_is_suggested_for_other_words(kind, name, cell):
    assert parse_cell(_spec(kind, name), cell) == (None, [f"'{cell}' is not a number"])
