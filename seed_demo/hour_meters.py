"""Hour meters of the demo pumps: daily running hours drawn per pump, read at any moment of the window."""

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd


@dataclass(frozen=True)
class HourMeters:
    """Cumulative running hours per pump (rows) and day of the window (columns)."""

    first_day: dt.date
    hours_at_start: np.ndarray  # (pumps,) meter reading at midnight of first_day
    daily_hours: np.ndarray  # (pumps, days) hours run on each day

    def read(self, pump_index: np.ndarray, when: pd.Series | pd.DatetimeIndex) -> np.ndarray:
        """Meter reading of each pump at each moment (same length arrays); the day's hours accrue evenly."""
        when = pd.DatetimeIndex(when)
        day_start = when.normalize()
        day = np.asarray((day_start - pd.Timestamp(self.first_day)).days, dtype=int)
        fraction = np.asarray((when - day_start) / pd.Timedelta(days=1), dtype=float)
        pump_index = np.asarray(pump_index, dtype=int)
        before = np.concatenate([np.zeros((len(self.hours_at_start), 1)), np.cumsum(self.daily_hours, axis=1)], axis=1)
        return self.hours_at_start[pump_index] + before[pump_index, day] + fraction * self.daily_hours[pump_index, day]


def draw_hour_meters(rng: np.random.Generator, specs: pd.DataFrame, first_day: dt.date, end: dt.date) -> HourMeters:
    """Each pump runs its own hours per day with day-to-day spread; it ran at that rate since installation."""
    days = (end - first_day).days + 1
    rate = specs["hours_per_day"].to_numpy()
    spread = np.clip(rng.normal(1.0, 0.1, size=(len(specs), days)), 0.6, 1.3)
    daily = np.minimum(rate[:, None] * spread, 24.0)
    days_before = np.array([(first_day - d).days for d in specs["installed_at"]], dtype=float)
    hours_at_start = specs["installed_hours"].to_numpy() + days_before * rate
    return HourMeters(first_day=first_day, hours_at_start=hours_at_start, daily_hours=daily)
