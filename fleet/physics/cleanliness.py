"""Oil cleanliness by ISO 4406:2021: counts per mL <-> scale numbers, reading and comparing codes.

A code such as 18/16/13 gives the scale numbers of the cumulative counts per mL at >= 4, >= 6 and >= 14 µm(c).
Microscope counts have no 4 µm channel and are written -/16/13. Scale numbers are returned as floats so that
NaN can mark "no count"; code 29 stands for ">28" (more than 2 500 000 per mL, off the top of the table).
"""

import re
from dataclasses import dataclass

import numpy as np

from fleet.physics.arrays import scalar_or_array

# ISO 4406:2021 Table 1, as "up to and including" particles per mL for scale numbers 0..28. Each row's
# "more than" is the row below's upper limit (0 for scale number 0). Rows 28 and ">28" are from memory.
SCALE_UPPER_PER_ML = np.array(
    [
        0.01, 0.02, 0.04, 0.08, 0.16, 0.32, 0.64, 1.3, 2.5, 5.0,
        10.0, 20.0, 40.0, 80.0, 160.0, 320.0, 640.0, 1300.0, 2500.0, 5000.0,
        10_000.0, 20_000.0, 40_000.0, 80_000.0, 160_000.0, 320_000.0, 640_000.0, 1_300_000.0, 2_500_000.0,
    ]
)  # fmt: skip
SCALE_LOWER_PER_ML = np.concatenate(([0.0], SCALE_UPPER_PER_ML[:-1]))
MAX_SCALE_NUMBER = len(SCALE_UPPER_PER_ML) - 1  # 28
ABOVE_SCALE = MAX_SCALE_NUMBER + 1  # 29, written ">28"

# A channel in which fewer particles than this were actually counted is reported with a leading ">="
# (from memory of ISO 4406; the count is too small to place the scale number firmly).
MIN_PARTICLES_COUNTED = 20

LOW_MARK = "≥"



def code_for_count(per_ml):
    """Scale number for a cumulative count per mL.

    A count equal to a row's upper limit takes that row (1300/mL -> 17). A count of 0 gives 0; above
    2 500 000/mL gives 29 (">28"). NaN or a negative count gives NaN.
    """
    count = np.asarray(per_ml, dtype=float)
    code = np.searchsorted(SCALE_UPPER_PER_ML, count, side="left").astype(float)
    valid = count >= 0.0  # False for NaN as well
    return scalar_or_array(np.where(valid, code, np.nan))


def count_range(code):
    """(more_than, up_to_and_including) particles per mL for a scale number; (2 500 000, inf) for 29.

    NaN for anything that is not a whole number in 0..29.
    """
    c = np.asarray(code, dtype=float)
    valid = (c >= 0) & (c <= ABOVE_SCALE) & (c == np.round(c))
    idx = np.where(valid, c, 0).astype(int)
    lower = np.append(SCALE_LOWER_PER_ML, SCALE_UPPER_PER_ML[-1])
    upper = np.append(SCALE_UPPER_PER_ML, np.inf)
    return scalar_or_array(np.where(valid, lower[idx], np.nan)), scalar_or_array(np.where(valid, upper[idx], np.nan))


def _channel_text(number: int, low: bool) -> str:
    text = f">{MAX_SCALE_NUMBER}" if number == ABOVE_SCALE else str(number)
    return LOW_MARK + text if low else text


@dataclass(frozen=True)
class Iso4406Code:
    """One ISO 4406 code. c4 is None for a microscope count ("-/16/13").

    low_count is True when any channel rests on fewer than 20 particles counted; low_channels says which
    (4, 6, 14 µm). Given low_count alone, the 14 µm channel is flagged: counts are cumulative, so it always
    has the fewest particles and is low whenever any channel is.
    """

    c4: int | None
    c6: int
    c14: int
    low_count: bool = False
    low_channels: tuple[bool, bool, bool] = (False, False, False)

    def __post_init__(self):
        for name, value in (("4", self.c4), ("6", self.c6), ("14", self.c14)):
            if value is None and name == "4":
                continue
            if not isinstance(value, int | np.integer) or not 0 <= value <= ABOVE_SCALE:
                raise ValueError(f"ISO 4406 scale number for {name} µm must be whole, 0..29 (29: >28), got {value!r}")
        present = [c for c in (self.c4, self.c6, self.c14) if c is not None]
        if any(a < b for a, b in zip(present, present[1:], strict=False)):
            raise ValueError(
                f"ISO 4406 code {self.c4}/{self.c6}/{self.c14}: counts are cumulative, so the scale numbers "
                "cannot rise from 4 to 6 to 14 µm"
            )
        channels = tuple(bool(x) for x in self.low_channels)
        if self.low_count and not any(channels):
            channels = (False, False, True)
        if self.c4 is None and channels[0]:
            raise ValueError("ISO 4406 code: the 4 µm channel cannot be flagged low when it was not counted")
        object.__setattr__(self, "low_channels", channels)
        object.__setattr__(self, "low_count", any(channels))

    def channels(self) -> tuple[float, float, float]:
        """The three scale numbers as floats, NaN for a missing 4 µm channel (for vectorised use)."""
        return (np.nan if self.c4 is None else float(self.c4), float(self.c6), float(self.c14))

    def __str__(self) -> str:
        low4, low6, low14 = self.low_channels
        first = "-" if self.c4 is None else _channel_text(self.c4, low4)
        return f"{first}/{_channel_text(self.c6, low6)}/{_channel_text(self.c14, low14)}"


_CHANNEL_PATTERN = re.compile(r"^(?P<low>≥|>=)?\s*(?P<number>>\s*28|\d{1,2})$")


def _parse_channel(part: str, size_um: int, text: str) -> tuple[int, bool]:
    match = _CHANNEL_PATTERN.match(part.strip())
    if match is None:
        raise ValueError(
            f"ISO 4406 code {text!r}: the {size_um} µm part {part.strip()!r} is not a scale number "
            "(expected 0..28 or '>28', optionally with a leading '≥')"
        )
    number_text = match.group("number").replace(" ", "")
    number = ABOVE_SCALE if number_text.startswith(">") else int(number_text)
    if number_text[0].isdigit() and number > MAX_SCALE_NUMBER:
        raise ValueError(
            f"ISO 4406 code {text!r}: scale number {number} for {size_um} µm is off the table (write '>28')"
        )
    return number, match.group("low") is not None


_STANDARD_NAMED = re.compile(r"^ISO(?:\s*4406(?::\s*\d{4})?)?\s*:?\s*", re.IGNORECASE)


def parse_code(text: str) -> Iso4406Code:
    """Read a code such as "18/16/13", "-/16/13" or "18/16/≥13" (">=" also accepted for "≥").

    Raises ValueError with the offending text when the code cannot be read.
    """
    if not isinstance(text, str):
        raise ValueError(f"ISO 4406 code must be text such as '18/16/13', got {text!r}")
    parts = _STANDARD_NAMED.sub("", text.strip()).split("/")  # "ISO 4406: 18/16/13", as lab reports print it
    if len(parts) == 2:  # a microscope count, or a code of the standard's older two-number form (from memory)
        raise ValueError(
            f"ISO 4406 code {text!r} has two parts: the current notation writes a code without the 4 µm channel "
            f"with a '-' first ('-/{'/'.join(p.strip() for p in parts)}'); write it so if the lab counted no 4 µm "
            "particles, or ask the lab for the three-part code")
    if len(parts) != 3:
        raise ValueError(
            f"ISO 4406 code {text!r} must have three parts separated by '/', such as '18/16/13' or '-/16/13'"
        )
    first = parts[0].strip()
    if first == "-":
        c4, low4 = None, False
    else:
        c4, low4 = _parse_channel(first, 4, text)
    c6, low6 = _parse_channel(parts[1], 6, text)
    c14, low14 = _parse_channel(parts[2], 14, text)
    return Iso4406Code(c4, c6, c14, low_channels=(low4, low6, low14))


def code_from_counts(count4_per_ml, count6_per_ml, count14_per_ml, volume_ml=None) -> Iso4406Code:
    """Build the code of one sample from its cumulative counts per mL (count4 NaN/None: microscope count).

    With volume_ml (the volume actually counted), a channel with fewer than 20 particles counted is flagged
    low (the 20-particle rule is from memory of ISO 4406).
    """
    raw = (count4_per_ml, count6_per_ml, count14_per_ml)
    counts = np.array([np.nan if c is None else c for c in raw], dtype=float)
    if np.isnan(counts[1:]).any() or (counts[~np.isnan(counts)] < 0).any():
        raise ValueError(f"ISO 4406 needs non-negative 6 and 14 µm counts per mL, got {counts.tolist()}")
    codes = np.asarray(code_for_count(counts))
    if volume_ml is None:
        low = (False, False, False)
    else:
        counted = counts * float(volume_ml)
        low = tuple(bool(x) for x in (~np.isnan(counted) & (counted < MIN_PARTICLES_COUNTED)))
    c4 = None if np.isnan(codes[0]) else int(codes[0])
    return Iso4406Code(c4, int(codes[1]), int(codes[2]), low_channels=low)


def steps_over_channels(codes, targets):
    """Vectorised: scale steps the worst channel is above target, per row.

    codes and targets: arrays of shape (..., 3) holding the 4, 6, 14 µm scale numbers (NaN where missing).
    Channels missing on either side are skipped; a row with nothing to compare gives NaN.
    Positive means dirtier than the target; <= 0 means it meets it.
    """
    diff = np.asarray(codes, dtype=float) - np.asarray(targets, dtype=float)
    return scalar_or_array(np.fmax.reduce(diff, axis=-1))  # fmax skips NaN without an all-NaN warning


def _as_code(code) -> Iso4406Code:
    return code if isinstance(code, Iso4406Code) else parse_code(code)


def steps_over(code, target) -> int:
    """Scale steps the worst channel of code is above target (text or Iso4406Code); <= 0 meets the target.

    A channel missing on either side (the 4 µm channel of a microscope count) is skipped.
    """
    steps = steps_over_channels(_as_code(code).channels(), _as_code(target).channels())
    return int(steps)  # the 6 and 14 µm channels always exist, so there is always something to compare
