"""An oil's ISO VG grade as drums and data sheets write it, and only a grade the standard has.

Reference: the grade table of ISO 3448:1992 (18 grades, 2 to 1500), transcribed here by hand; 2200 and 3200 from
wider tables of the same series (from memory)."""

import pytest

from fleet.io.columns import KINDS
from fleet.io.parse import parse_cell
from fleet.physics.oil import ISO_VG_GRADES

ISO_3448_1992 = [2, 3, 5, 7, 10, 15, 22, 32, 46, 68, 100, 150, 220, 320, 460, 680, 1000, 1500]
GRADE = next(c for c in KINDS["pumps"] if c.name == "oil_grade")


def test_the_grades_are_the_standards():
    assert list(ISO_VG_GRADES) == ISO_3448_1992 + [2200, 3200]


@pytest.mark.parametrize("text", ["ISO VG 46", "VG46", "vg 46", "ISO-VG-46", " 46 ", "46"])
def test_a_grade_is_read_as_written(text):
    assert parse_cell(GRADE, text) == (46, [])


@pytest.mark.parametrize("text, reason", [
    ("47", "47 is not an ISO VG grade (ISO 3448: 2, 3, 5, 7, 10, 15, 22, 32, 46, 68, 100, 150, 220, 320, 460, 680, "
           "1000, 1500, 2200, 3200)"),
    ("VG x", "'VG x' is not a number"),
    ("SAE 30", "'SAE 30' is not a number"),  # another classification: not read as a grade
])
def test_what_is_not_a_grade_is_refused_with_the_reason(text, reason):
    assert parse_cell(GRADE, text) == (None, [reason])
