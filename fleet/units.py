"""The one place units are understood.

Every number that enters fleet comes with a unit (a CSV header such as ``outlet_flow [gal/min]``, a form's unit
choice, a JSON ``{"value": 10, "unit": "gal/min"}``); it is converted here to the canonical unit of its quantity
and stored that way. Pages convert back to what the site prefers.
"""

import re
from functools import lru_cache

import numpy as np
import pint

ureg = pint.UnitRegistry()

# Canonical storage unit of each quantity, as pint spells it, and how pages show it.
CANONICAL: dict[str, str] = {
    "pressure": "bar",
    "flow": "L/min",
    "speed": "rpm",
    "temperature": "degC",
    "hours": "hour",
    "displacement": "cm**3",  # per revolution, which pint cannot carry without a 2*pi factor
    "viscosity": "mm**2/s",
    "density": "kg/L",
    "power": "kW",
    "fraction": "dimensionless",
    "concentration": "ppm",
    "count": "1/mL",
    "duration": "hour",
}
LABELS: dict[str, str] = {
    "pressure": "bar",
    "flow": "L/min",
    "speed": "rpm",
    "temperature": "degC",
    "hours": "h",
    "displacement": "cm3/rev",
    "viscosity": "mm2/s",
    "density": "kg/L",
    "power": "kW",
    "fraction": "",
    "concentration": "ppm",
    "count": "1/mL",
    "duration": "h",
}

# Units people write that pint does not know, or would read in a way the trade does not mean.
# How a unit is written for people (pages, forms, chart axes, messages); files keep pint's spelling.
_SHOWN: dict[str, str] = {
    "degC": "°C",
    "degF": "°F",
    "gal/min": "US gal/min",
    "m**3/h": "m³/h",
    "cm**3": "cm³",
    "cm3/rev": "cm³/rev",
    "in3/rev": "in³/rev",
    "mm2/s": "mm²/s",
    "mm**2/s": "mm²/s",
}


def shown(unit_text: str | None) -> str:
    """A unit as a page shows it: '°C' for degC, 'US gal/min' for gal/min, 'm³/h' for m**3/h."""
    text = unit_text or ""
    return _SHOWN.get(text, text.replace("**3", "³").replace("**2", "²"))


SHOWN_LABELS: dict[str, str] = {quantity: shown(label) for quantity, label in LABELS.items()}

_ALIASES: dict[str, str] = {
    "gpm": "gal/min",
    "usgpm": "gal/min",
    "lpm": "L/min",
    "l/min": "L/min",
    "psig": "psi",
    "barg": "bar",
    "c": "degC",
    "°c": "degC",
    "degc": "degC",
    "f": "degF",
    "°f": "degF",
    "degf": "degF",
    "cst": "mm**2/s",
    "hrs": "hour",
    "hr": "hour",
}
# Shaft speeds: pint takes a revolution as 2*pi radians, so '1/min' and 'Hz' would be read as radians per time.
# In this trade both mean revolutions, so they are mapped before pint sees them.
_SPEED_ALIASES: dict[str, str] = {
    "1/min": "rpm",
    "min^-1": "rpm",
    "min-1": "rpm",
    "/min": "rpm",
    "r/min": "rpm",
    "rev/min": "rpm",
    "hz": "revolution/second",
    "1/s": "revolution/second",
    "rps": "revolution/second",
    "r/s": "revolution/second",
    "rev/s": "revolution/second",
}
_PER_REV = re.compile(r"\s*/\s*(rev|revolution|r)\s*$", re.IGNORECASE)
_POWER_SUFFIX = re.compile(r"(?<=[a-zA-Z])([23])(?![\d.])")  # cm3 -> cm**3, mm2 -> mm**2
_HEADER = re.compile(r"^\s*(?P<name>[^\[\]]*?)\s*(\[(?P<unit>[^\[\]]*)\])?\s*$")


class UnitError(ValueError):
    """A unit that is unknown, or not a unit of the quantity asked for."""


def parse_header(header: str) -> tuple[str, str | None]:
    """Split ``'outlet_flow [gal/min]'`` into ``('outlet_flow', 'gal/min')``; no brackets gives a None unit."""
    match = _HEADER.match(header)
    if not match:
        raise UnitError(f"column header {header!r} is not 'name' or 'name [unit]'")
    unit = match.group("unit")
    return match.group("name").strip().lower(), (unit.strip() or None) if unit is not None else None


def _normalise(unit_text: str, quantity: str) -> str:
    text = unit_text.strip()
    low = text.lower().replace(" ", "")
    if quantity == "speed" and low in _SPEED_ALIASES:
        return _SPEED_ALIASES[low]
    if low in _ALIASES:
        return _ALIASES[low]
    if quantity == "displacement":
        text = _PER_REV.sub("", text)
    text = text.replace("³", "**3").replace("²", "**2")
    return _POWER_SUFFIX.sub(r"**\1", text)


@lru_cache(maxsize=256)
def resolve(unit_text: str | None, quantity: str) -> tuple[float, pint.Unit]:
    """``(scale, unit)`` for ``unit_text`` as a unit of ``quantity``; None or blank gives the canonical unit.

    The scale carries written factors such as '1/(100 mL)'. Raises UnitError naming the unit and the
    quantity when pint does not know it or it measures something else.
    """
    if quantity not in CANONICAL:
        raise KeyError(f"unknown quantity {quantity!r}")
    canonical = ureg.Unit(CANONICAL[quantity])
    if unit_text is None or not unit_text.strip():
        return 1.0, canonical
    try:
        parsed = ureg.parse_expression(_normalise(unit_text, quantity))
    except Exception as exc:  # pint raises many kinds (undefined, syntax, tokenizer) for a bad unit string
        raise UnitError(f"unit {unit_text!r} is not a unit fleet knows") from exc
    if not isinstance(parsed, pint.Quantity) or parsed.dimensionality != canonical.dimensionality:
        raise UnitError(f"unit {unit_text!r} is not a unit of {quantity} (expected something like "
                        f"{SHOWN_LABELS[quantity] or 'a plain number or %'})")
    return float(parsed.magnitude), parsed.units


def is_canonical(unit_text: str | None, quantity: str) -> bool:
    scale, unit = resolve(unit_text, quantity)
    return scale == 1.0 and unit == ureg.Unit(CANONICAL[quantity])


def to_canonical(values, unit_text: str | None, quantity: str) -> np.ndarray:
    """Convert numbers given in ``unit_text`` to the canonical unit of ``quantity`` (vectorised, NaN kept)."""
    scale, unit = resolve(unit_text, quantity)
    array = np.asarray(values, dtype=float)
    if is_canonical(unit_text, quantity):
        return array
    # Quantity(...) rather than multiplication: offset units (degF) are only valid that way.
    return ureg.Quantity(array * scale, unit).to(CANONICAL[quantity]).magnitude


def from_canonical(values, quantity: str, unit_text: str | None) -> np.ndarray:
    """Convert canonical numbers of ``quantity`` to ``unit_text`` for display or export."""
    scale, unit = resolve(unit_text, quantity)
    array = np.asarray(values, dtype=float)
    if is_canonical(unit_text, quantity):
        return array
    return ureg.Quantity(array, CANONICAL[quantity]).to(unit).magnitude / scale


def significant(values, digits: int = 12) -> np.ndarray:
    """Converted numbers to ``digits`` significant digits, for files and tables people read: 2386 psi, not the
    2386.0000000000014 a unit factor leaves (far finer than any gauge; an import reads it back the same)."""
    array = np.array(values, dtype=float)
    finite = np.isfinite(array)
    array[finite] = np.char.mod(f"%.{digits}g", array[finite]).astype(float)
    return array


def convert_one(value: float, unit_text: str | None, quantity: str) -> float:
    """Scalar form of :func:`to_canonical`."""
    return float(to_canonical([value], unit_text, quantity)[0])


# Units a site can choose for display and for form entry, per quantity (canonical first).
CHOICES: dict[str, tuple[str, ...]] = {
    "pressure": ("bar", "psi", "MPa", "kPa"),
    "flow": ("L/min", "gal/min", "m**3/h"),
    "speed": ("rpm", "Hz"),
    "temperature": ("degC", "degF"),
    "hours": ("h",),
    "displacement": ("cm3/rev", "in3/rev"),
    "viscosity": ("mm2/s",),
    "density": ("kg/L",),
    "power": ("kW", "hp"),
}


def linear_form(unit_text: str | None, quantity: str) -> tuple[float, float]:
    """``(factor, offset)`` with canonical = factor * value + offset: every unit fleet offers is linear (degF is
    affine), so a device can convert typed numbers with these two figures, computed here by pint."""
    offset, one = to_canonical([0.0, 1.0], unit_text, quantity)
    return float(one - offset), float(offset)


# The units a site may choose for its pages and forms (fleet.db.models.Site): canonical first.
SITE_QUANTITIES: dict[str, str] = {"pressure_unit": "pressure", "flow_unit": "flow", "temperature_unit": "temperature"}
SITE_UNITS: dict[str, tuple[str, ...]] = {
    "pressure": ("bar", "psi", "kPa", "MPa"),
    "flow": ("L/min", "gal/min", "m**3/h"),
    "temperature": ("degC", "degF"),
}


def site_unit(unit_text: str | None, quantity: str) -> str:
    """The site's display unit for ``quantity`` as fleet spells it, checked by pint; UnitError when it is not one
    of the site choices (a site picks from a short list, so every page can label it)."""
    text = (unit_text or "").strip()
    if not text:
        return SITE_UNITS[quantity][0]
    resolve(text, quantity)  # pint knows it, and it measures the quantity
    for choice in SITE_UNITS[quantity]:
        if choice.lower() == text.lower() or shown(choice).lower() == text.lower():
            return choice
    offered = ", ".join(shown(c) for c in SITE_UNITS[quantity])
    raise UnitError(f"unit {text!r} is not offered for a site's {quantity} (one of {offered})")
