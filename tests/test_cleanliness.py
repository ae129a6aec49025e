"""ISO 4406:2021 cleanliness codes: the scale table, its boundaries, the worked example, parsing and targets."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from fleet.physics.cleanliness import (
    ABOVE_SCALE,
    SCALE_UPPER_PER_ML,
    Iso4406Code,
    code_for_count,
    code_from_counts,
    count_range,
    parse_code,
    steps_over,
    steps_over_channels,
)

# ISO 4406:2021 Table 1 as given in domain.md sec. 6: scale number -> (more than, up to and including) per mL.
# Rows 28 and ">28" are from memory.
ISO_4406_TABLE = {
    0: (0.0, 0.01), 1: (0.01, 0.02), 2: (0.02, 0.04), 3: (0.04, 0.08), 4: (0.08, 0.16), 5: (0.16, 0.32),
    6: (0.32, 0.64), 7: (0.64, 1.3), 8: (1.3, 2.5), 9: (2.5, 5), 10: (5, 10), 11: (10, 20), 12: (20, 40),
    13: (40, 80), 14: (80, 160), 15: (160, 320), 16: (320, 640), 17: (640, 1300), 18: (1300, 2500),
    19: (2500, 5000), 20: (5000, 10_000), 21: (10_000, 20_000), 22: (20_000, 40_000), 23: (40_000, 80_000),
    24: (80_000, 160_000), 25: (160_000, 320_000), 26: (320_000, 640_000), 27: (640_000, 1_300_000),
    28: (1_300_000, 2_500_000),
}  # fmt: skip


def test_scale_table_matches_iso_4406():
    # ISO 4406:2021 Table 1 (domain.md sec. 6)
    codes = np.array(sorted(ISO_4406_TABLE))
    lower, upper = count_range(codes)
    np.testing.assert_allclose(lower, [ISO_4406_TABLE[c][0] for c in codes])
    np.testing.assert_allclose(upper, [ISO_4406_TABLE[c][1] for c in codes])
    assert count_range(ABOVE_SCALE) == (2_500_000.0, np.inf)  # ">28" (from memory)
    assert np.isnan(count_range(np.array([30, -1, 2.5, np.nan]))).all()


def test_one_scale_step_is_about_a_doubling():
    # ISO 4406 (domain.md sec. 6): one step ~ doubling; the printed limits are rounded 0.01 * 2^n
    ratios = SCALE_UPPER_PER_ML[1:] / SCALE_UPPER_PER_ML[:-1]
    assert ((ratios > 1.9) & (ratios < 2.05)).all()
    rounded = SCALE_UPPER_PER_ML / (0.01 * 2.0 ** np.arange(len(SCALE_UPPER_PER_ML)))
    assert ((rounded > 0.93) & (rounded < 1.02)).all()


def test_count_exactly_on_a_limit_takes_the_lower_number():
    # ISO 4406:2021 Table 1: "more than" < count <= "up to and including"; 1300/mL -> 17 (domain.md sec. 6)
    assert code_for_count(1300.0) == 17
    assert code_for_count(1300.001) == 18
    uppers = np.array([ISO_4406_TABLE[c][1] for c in range(29)], dtype=float)
    np.testing.assert_array_equal(code_for_count(uppers), np.arange(29))
    np.testing.assert_array_equal(code_for_count(uppers * 1.0001), np.arange(1, 30))


def test_edges_of_the_scale_and_missing_counts():
    # ISO 4406 Table 1: 0 counts sit in row 0; above 2 500 000/mL is ">28", returned as 29 (from memory)
    codes = code_for_count(np.array([0.0, 0.005, 2_500_000.0, 2_500_001.0, np.nan, -3.0]))
    np.testing.assert_array_equal(codes[:4], [0, 0, 28, ABOVE_SCALE])
    assert np.isnan(codes[4:]).all()
    assert np.isnan(code_for_count(np.nan))


@given(st.floats(min_value=0.0, max_value=2_500_000.0, allow_nan=False))
def test_every_count_falls_inside_its_rows_range(count):
    # ISO 4406 Table 1 read both ways: the row found for a count must contain it
    code = code_for_count(count)
    more_than, up_to = count_range(code)
    assert (more_than < count <= up_to) or (code == 0 and count == 0.0)


def test_worked_example_per_100_ml():
    # ISO 4406 worked example (domain.md sec. 6): 300 000 / 50 000 / 700 particles per 100 mL
    # -> 3000 / 500 / 7 per mL -> 19/16/10
    per_100_ml = np.array([300_000.0, 50_000.0, 700.0])
    np.testing.assert_array_equal(code_for_count(per_100_ml / 100.0), [19, 16, 10])
    code = code_from_counts(*(per_100_ml / 100.0))
    assert str(code) == "19/16/10"
    assert (code.c4, code.c6, code.c14, code.low_count) == (19, 16, 10, False)


def test_few_particles_counted_are_flagged_low():
    # ISO 4406: fewer than 20 particles counted in a channel -> the number is reported with ">=" (from memory)
    # 7 per mL in 2 mL counted = 14 particles at >= 14 µm: low; 500 per mL x 2 mL = 1000 at >= 6 µm: fine
    code = code_from_counts(3000.0, 500.0, 7.0, volume_ml=2.0)
    assert code.low_channels == (False, False, True)
    assert str(code) == "19/16/≥10"
    # exactly 20 particles is enough
    assert not code_from_counts(3000.0, 500.0, 10.0, volume_ml=2.0).low_count


def test_microscope_count_has_no_4_um_channel():
    # ISO 4406 (domain.md sec. 6): microscope counts give two numbers with "-" for the first channel
    code = code_from_counts(None, 500.0, 7.0)
    assert code.c4 is None and str(code) == "-/16/10"
    assert str(code_from_counts(np.nan, 500.0, 7.0)) == "-/16/10"
    with pytest.raises(ValueError, match="6 and 14 µm"):
        code_from_counts(3000.0, np.nan, 7.0)
    with pytest.raises(ValueError, match="non-negative"):
        code_from_counts(3000.0, 500.0, -1.0)


@pytest.mark.parametrize(
    ("text", "channels", "low", "shown"),
    [
        ("18/16/13", (18, 16, 13), (False, False, False), "18/16/13"),
        (" 18 / 16 / 13 ", (18, 16, 13), (False, False, False), "18/16/13"),
        ("-/16/13", (None, 16, 13), (False, False, False), "-/16/13"),
        ("≥18/16/13", (18, 16, 13), (True, False, False), "≥18/16/13"),
        ("22/20/>=12", (22, 20, 12), (False, False, True), "22/20/≥12"),
        (">28/27/20", (ABOVE_SCALE, 27, 20), (False, False, False), ">28/27/20"),
        ("0/0/0", (0, 0, 0), (False, False, False), "0/0/0"),
        ("ISO 4406: 18/16/13", (18, 16, 13), (False, False, False), "18/16/13"),  # as lab reports print it
        ("iso 17/15/12", (17, 15, 12), (False, False, False), "17/15/12"),
    ],
)
def test_parse_code_forms(text, channels, low, shown):
    # ISO 4406:2021 notation (domain.md sec. 6): three numbers, "-" for a missing 4 µm channel, ">=" marks
    code = parse_code(text)
    assert (code.c4, code.c6, code.c14) == channels
    assert code.low_channels == low and code.low_count == any(low)
    assert str(code) == shown
    assert parse_code(str(code)) == code


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("18/16", "has two parts: .*'-/18/16'"),  # not read as a three-part code: the lab is asked or the '-' added
        ("ISO 4406: 18/16/-", "14 µm part '-'"),  # the standard named before the code, as lab reports print it
        ("18/16/13/11", "three parts"),
        ("", "three parts"),
        ("18-16-13", "three parts"),
        ("a/16/13", "4 µm part 'a'"),
        ("18//13", "6 µm part ''"),
        ("18/16/-", "14 µm part '-'"),
        ("18/16/29", "off the table"),
        ("18/16/>29", "14 µm part '>29'"),
        ("13/16/18", "cumulative"),
    ],
)
def test_parse_code_errors(text, message):
    with pytest.raises(ValueError, match=message):
        parse_code(text)


def test_parse_code_needs_text():
    with pytest.raises(ValueError, match="must be text"):
        parse_code(181613)


def test_code_record_checks_its_numbers():
    with pytest.raises(ValueError, match="14 µm"):
        Iso4406Code(18, 16, 30)
    with pytest.raises(ValueError, match="not counted"):
        Iso4406Code(None, 16, 13, low_channels=(True, False, False))
    # low_count alone flags the 14 µm channel: cumulative counts make it the smallest, so it is low if any is
    assert str(Iso4406Code(18, 16, 13, low_count=True)) == "18/16/≥13"


def test_steps_over_target():
    # Target codes (domain.md sec. 6, common practice, filter-industry guideline charts): vane 18/16/13,
    # variable piston 17/15/12, gear 19/17/14. The worked example 19/16/10 is one step dirtier than the vane
    # target (4 µm channel), two steps than variable piston, and meets the gear target.
    assert steps_over("19/16/10", "18/16/13") == 1
    assert steps_over("19/16/10", "17/15/12") == 2
    assert steps_over("19/16/10", "19/17/14") <= 0
    assert steps_over(parse_code("17/15/12"), "19/17/14") == -2
    # a microscope count skips the 4 µm channel on either side
    assert steps_over("-/16/14", "18/16/13") == 1
    assert steps_over("22/16/13", "-/16/13") == 0


def test_steps_over_vectorised():
    codes = np.array([[19, 16, 10], [np.nan, 16, 14], [20, 18, 15], [np.nan, np.nan, np.nan]], dtype=float)
    targets = np.array([18, 16, 13], dtype=float)
    steps = steps_over_channels(codes, targets)
    np.testing.assert_array_equal(steps[:3], [1, 1, 2])
    assert np.isnan(steps[3])
