"""The hour meter against the clock: the one rule that asks a technician to look again at running hours.

A meter that went backwards, or that ran faster than the clock since the reading before, is usually a slip of
the finger or the wrong pump, but can be right (a new meter, a clock set wrong). So it is a doubt shown before
saving (a form) or beside what was stored (the API, a CSV import), never a refusal. Every door asks through
``meter_doubt`` (one reading against the one before it) or ``meter_doubts`` (a table of readings).
"""

from dataclasses import dataclass
from datetime import datetime

import pandas as pd

# A meter may run ahead of the clock by a little: readings rounded to the hour, a wall clock a minute out.
# Allowed: clock hours + 1 h + 2 % of them. Common practice, no source.
FAST_ALLOWANCE_H = 1.0
FAST_ALLOWANCE_FRACTION = 0.02


@dataclass(frozen=True)
class MeterDoubt:
    code: str  # hours_backwards | hours_faster_than_clock
    message: str


def most_hours_possible(last_at: datetime, last_hours: float, at: datetime) -> float:
    """The highest meter value a reading at ``at`` may show without a doubt, after ``last_hours`` at ``last_at``."""
    clock_h = max((at - last_at).total_seconds() / 3600.0, 0.0)
    return last_hours + clock_h * (1.0 + FAST_ALLOWANCE_FRACTION) + FAST_ALLOWANCE_H


def meter_doubt(last_at: datetime | None, last_hours: float | None, at: datetime, hours: float) -> MeterDoubt | None:
    """Why a meter value ``hours`` at ``at`` deserves a second look after the reading (``last_at``,
    ``last_hours``) before it, or None."""
    if last_at is None or last_hours is None:
        return None
    if hours < last_hours:
        return MeterDoubt("hours_backwards",
                          f"Running hours {hours:.0f} h are below the last reading's {last_hours:.0f} h "
                          f"({last_at:%Y-%m-%d}): look again. Is it the right pump, or a new hour meter?")
    if hours > most_hours_possible(last_at, last_hours, at):
        clock_h = max((at - last_at).total_seconds() / 3600.0, 0.0)
        return MeterDoubt("hours_faster_than_clock",
                          f"Running hours advanced {hours - last_hours:.0f} h in {clock_h:.1f} h of clock time since "
                          f"the last reading ({last_at:%Y-%m-%d %H:%M}, {last_hours:.0f} h): look again. Is it the "
                          "right pump, a slip of the finger, or the time?")
    return None


def meter_doubts(new: pd.DataFrame, stored: pd.DataFrame) -> list[tuple[object, MeterDoubt]]:
    """(index in ``new``, doubt) for each new reading whose meter doubts the reading before it.

    Both frames hold pump_id, taken_at and hours; the reading before may be stored or another new row.
    """
    parts = [new[["pump_id", "taken_at", "hours"]].assign(is_new=True, new_index=new.index)]
    if len(stored):  # pandas warns of concatenating an empty frame
        parts.append(stored[["pump_id", "taken_at", "hours"]].assign(is_new=False, new_index=None))
    both = pd.concat(parts, ignore_index=True)
    both = both.sort_values(["pump_id", "taken_at"], kind="stable")
    before = both.groupby("pump_id")[["taken_at", "hours"]].shift(1)
    out = []
    for row, last_at, last_hours in zip(both.itertuples(), before["taken_at"], before["hours"], strict=True):
        if not row.is_new or pd.isna(last_at):
            continue
        doubt = meter_doubt(pd.Timestamp(last_at).to_pydatetime(), float(last_hours),
                            pd.Timestamp(row.taken_at).to_pydatetime(), float(row.hours))
        if doubt:
            out.append((row.new_index, doubt))
    return out
