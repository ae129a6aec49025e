"""Unit conversion checks against pint and the constants of NIST SP 811 (domain.md sec. 1)."""

import numpy as np
import pint
import pytest

from fleet import units

ureg = pint.UnitRegistry()  # an independent registry: the reference library's own conversion


@pytest.mark.parametrize(
    ("value", "unit", "quantity", "expected"),
    [
        # NIST SP 811 / pint default definitions: 1 US gal = 3.785411784 L -> 10 gal/min = 37.854 L/min
        (10, "gal/min", "flow", 37.85411784),
        (10, "gpm", "flow", 37.85411784),  # trade spelling, mapped by fleet
        # 1 psi = 0.0689475729 bar -> 3000 psi = 206.84 bar
        (3000, "psi", "pressure", 206.8427188),
        # degF -> degC = (F - 32) * 5/9 -> 140 degF = 60 degC
        (140, "degF", "temperature", 60.0),
        (333.15, "K", "temperature", 60.0),
        # 1 in = 2.54 cm exactly -> 1.800 in3/rev = 29.497 cm3/rev
        (1.8, "in3/rev", "displacement", 1.8 * 2.54**3),
        (25, "Hz", "speed", 1500.0),  # a shaft turning 25 times a second
        (1500, "1/min", "speed", 1500.0),
        (2.5, "MPa", "pressure", 25.0),
        (6, "m3/h", "flow", 100.0),
        (85, "%", "fraction", 0.85),
        (500, "1/(100 mL)", "count", 5.0),
    ],
)
def test_to_canonical_matches_reference(value, unit, quantity, expected):
    assert units.convert_one(value, unit, quantity) == pytest.approx(expected, rel=1e-9)


def test_conversions_agree_with_pint_directly():
    # pint itself, through a registry fleet does not share, converting the same arrays.
    flows = np.array([1.0, 10.0, 123.4])
    assert np.allclose(units.to_canonical(flows, "gal/min", "flow"),
                       ureg.Quantity(flows, "gallon/minute").to("liter/minute").magnitude)
    temps = np.array([-40.0, 32.0, 212.0])
    assert np.allclose(units.to_canonical(temps, "degF", "temperature"),
                       ureg.Quantity(temps, ureg.degF).to(ureg.degC).magnitude)
    assert np.allclose(units.to_canonical(temps, "degF", "temperature"), [-40.0, 0.0, 100.0])


def test_round_trip_to_display_units():
    bars = np.array([0.0, 206.84, 350.0])
    assert np.allclose(units.to_canonical(units.from_canonical(bars, "pressure", "psi"), "psi", "pressure"), bars)
    assert units.from_canonical([60.0], "temperature", "degF")[0] == pytest.approx(140.0)


def test_significant_digits_drop_a_factor_s_noise_and_keep_the_value():
    # 164.508909... bar is 2386 psi (pint, an independent registry); the factor leaves noise in the last bits.
    psi = units.from_canonical([ureg.Quantity(2386.0, "psi").to("bar").magnitude], "pressure", "psi")
    shown = units.significant(np.concatenate([psi, [1 / 3, -0.5, np.nan, 1e-20]]))
    assert shown[0] == 2386.0 and repr(float(shown[1])) == "0.333333333333"
    assert shown[2] == -0.5 and np.isnan(shown[3]) and shown[4] == 1e-20
    values = np.random.default_rng(4).uniform(-1e4, 1e4, 1000)
    assert np.allclose(units.significant(values), values, rtol=5e-12, atol=0)  # 12 digits: half a unit in the last


def test_nan_is_kept():
    out = units.to_canonical([np.nan, 10.0], "gal/min", "flow")
    assert np.isnan(out[0]) and out[1] == pytest.approx(37.854, abs=1e-3)


@pytest.mark.parametrize(
    ("unit", "quantity", "message"),
    [
        ("bar", "flow", "not a unit of flow"),
        ("L/min", "pressure", "not a unit of pressure"),
        ("glorps/min", "flow", "not a unit fleet knows"),
        ("degC", "hours", "not a unit of hours"),
    ],
)
def test_wrong_units_are_refused_with_the_unit_named(unit, quantity, message):
    with pytest.raises(units.UnitError, match=message) as info:
        units.resolve(unit, quantity)
    assert repr(unit) in str(info.value)


def test_header_parsing():
    assert units.parse_header("outlet_flow [gal/min]") == ("outlet_flow", "gal/min")
    assert units.parse_header(" Oil_Temp [degF] ") == ("oil_temp", "degF")
    assert units.parse_header("pump") == ("pump", None)
