"""The hour meter against the clock: the one rule that asks a technician to look again at running hours.

A meter that went backwards, or that ran faster than the clock since the reading before, is usually a slip of
the finger or the wrong pump, but can be right (a new meter, a clock set wrong). So it is a doubt shown before
saving (a form) or beside what was stored (the API, a CSV import), never a refusal. Every door asks through
``meter_doubt`` (one reading against the one before it) or ``meter_doubts`` (a table of readings).
"""

from dataclasses import dataclass
from datetime import datetime

import numpy as np
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

    Both frames hold pump_id, taken_at and hours; the reading before may be stored or another new row. The
    comparison runs over whole columns first, with a margin, to find the few readings worth asking about; each of
    those is then asked ``meter_doubt`` itself, so the rule and its words stay in one place.
    """
    parts = [new[["pump_id", "taken_at", "hours"]].assign(is_new=True, new_index=np.arange(len(new)))]
    if len(stored):  # pandas warns of concatenating an empty frame
        parts.append(stored[["pump_id", "taken_at", "hours"]].assign(is_new=False, new_index=-1))
    both = pd.concat(parts, ignore_index=True)
    both = both.sort_values(["pump_id", "taken_at"], kind="stable")
    pump = both["pump_id"].to_numpy()
    at = both["taken_at"].to_numpy(dtype="datetime64[us]")
    hours = both["hours"].to_numpy(dtype=float)
    same_pump = np.zeros(len(both), dtype=bool)
    same_pump[1:] = pump[1:] == pump[:-1]
    last_hours = np.roll(hours, 1)
    clock_h = np.maximum((at - np.roll(at, 1)) / np.timedelta64(1, "h"), 0.0)
    limit = last_hours + clock_h * (1.0 + FAST_ALLOWANCE_FRACTION) + FAST_ALLOWANCE_H
    with np.errstate(invalid="ignore"):
        worth = (hours < last_hours) | (hours > limit - 1e-6 * np.maximum(1.0, np.abs(limit)))
    worth &= same_pump & both["is_new"].to_numpy(dtype=bool) & ~np.isnan(last_hours)
    out = []
    new_index = both["new_index"].to_numpy()
    for position in np.flatnonzero(worth):
        doubt = meter_doubt(pd.Timestamp(at[position - 1]).to_pydatetime(), float(hours[position - 1]),
                            pd.Timestamp(at[position]).to_pydatetime(), float(hours[position]))
        if doubt:
            out.append((new.index[new_index[position]], doubt))
    return out
