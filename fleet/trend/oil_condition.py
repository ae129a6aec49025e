"""Oil condition per pump: the latest lab result of its machine's oil, and the oil temperature it runs at."""

from functools import lru_cache

import numpy as np
import pandas as pd

from fleet.physics.cleanliness import Iso4406Code, parse_code, steps_over_channels
from fleet.physics.oil import kinematic_viscosity_cst, oil_life_factor, viscosity_window_flag
from fleet.trend.grouped import group_median, group_time_max
from fleet.trend.settings import AnalysisSettings


def lab_days_waiting(sampled_at, at) -> int:
    """Whole days a sample has waited for its lab result at ``at`` (days begun are not counted). The one figure
    both the analysis's sentence and the weekly review's table state."""
    return int((pd.Timestamp(at) - pd.Timestamp(sampled_at)) // pd.Timedelta(days=1))


def lab_late_sentence(sampled_at, days: int, late_days: float) -> str:
    return (f"The oil sample taken {pd.Timestamp(sampled_at):%Y-%m-%d} has waited {days} day{'s' if days != 1 else ''}"
            f" for its lab result (late after {late_days:.0f} days).")


OIL_COLUMNS = [
    "sample_sampled_at",
    "sample_reported_at",
    "cleanliness_code",
    "cleanliness_target",
    "cleanliness_steps_over",
    "low_count",
    "water_ppm",
    "water_high",
    "lab_late",
    "lab_pending_since",
    "oil_temp_c",
    "oil_temp_typical_c",
    "oil_hot",
    "oil_cold",
    "oil_life_factor",
    "viscosity_typical_cst",
    "viscosity_window",
]


@lru_cache(maxsize=256)
def _target_channels(text) -> tuple[float, float, float]:
    if not isinstance(text, str) or not text.strip():
        return (np.nan, np.nan, np.nan)
    try:
        return parse_code(text).channels()
    except ValueError:
        return (np.nan, np.nan, np.nan)


def _code_text(c4, c6, c14, low) -> str | None:
    if not (np.isfinite(c6) and np.isfinite(c14)):
        return None
    try:
        code = Iso4406Code(None if not np.isfinite(c4) else int(c4), int(c6), int(c14), low_count=bool(low))
        return str(code)
    except ValueError:  # a lab typo (channels rising); show the numbers as reported
        return "/".join("-" if not np.isfinite(c) else str(int(c)) for c in (c4, c6, c14))


def latest_lab_results(samples: pd.DataFrame, now, settings: AnalysisSettings) -> tuple[np.ndarray, dict]:
    """Per machine: the latest reported sample (sampled and reported times, code channels c4/c6/c14, low count,
    water) and whether a result is late (lab_late, lab_pending_since); the machines (sorted) and each column as an
    array in their order. ``samples`` not empty."""
    machines, machine = np.unique(samples["machine_id"].to_numpy(np.int64), return_inverse=True)
    n = len(machines)
    sampled = _times(samples["sampled_at"])
    reported = _times(samples["reported_at"])
    done = ~np.isnat(reported)
    # Each machine's latest reported sample: the last by (sampled, reported), ties kept in the samples' order.
    rows = np.flatnonzero(done)
    rows = rows[np.lexsort((reported[rows], sampled[rows], machine[rows]))]
    latest = np.full(n, -1)
    latest[machine[rows]] = rows
    has = latest >= 0
    at = np.maximum(latest, 0)

    def pick(column: str) -> np.ndarray:
        return np.where(has, column_floats(samples[column])[at], np.nan)

    low = samples["low_count"]
    low = low.to_numpy() if low.dtype == bool else low.astype("boolean").fillna(False).to_numpy(bool)
    pending = group_time_max(machine[~done], sampled[~done], n, smallest=True)
    late_after = np.datetime64(pd.Timestamp(now) - pd.Timedelta(days=settings.lab_late_days))
    return machines, {
        "sample_sampled_at": np.where(has, sampled[at], np.datetime64("NaT")).astype(sampled.dtype),
        "sample_reported_at": np.where(has, reported[at], np.datetime64("NaT")).astype(reported.dtype),
        "c4": pick("code_4"),
        "c6": pick("code_6"),
        "c14": pick("code_14"),
        "low_count": has & low[at],
        "water_ppm": pick("water_ppm"),
        "lab_late": ~np.isnat(pending) & (pending < late_after),
        "lab_pending_since": pending,
    }


def _times(column: pd.Series) -> np.ndarray:
    return (column if column.dtype.kind == "M" else pd.to_datetime(column)).to_numpy()


_PLAIN_NUMBER_TYPES = frozenset({float, int, type(None), np.float64, np.int64})


def plain_floats(values: np.ndarray) -> np.ndarray:
    """Values as floats, as pd.to_numeric(errors="coerce") reads them: numpy numbers, and objects that are all plain
    numbers or None (a setting per pump), by a cast; anything else through pandas."""
    if values.dtype.kind in "fiub":
        return values.astype(float)
    if values.dtype == object and all(type(v) in _PLAIN_NUMBER_TYPES for v in values.tolist()):
        return values.astype(float)
    return pd.to_numeric(pd.Series(values, dtype=values.dtype if values.dtype.kind != "U" else object),
                         errors="coerce").to_numpy(dtype=float)


def column_floats(column) -> np.ndarray:
    """A column (a Series or an array) as floats, as pd.to_numeric(errors="coerce") reads it (numbers already: no
    parse)."""
    if isinstance(column.dtype, np.dtype):
        return plain_floats(np.asarray(column))
    return pd.to_numeric(pd.Series(column), errors="coerce").to_numpy(float)


def oil_temperatures(readings: pd.DataFrame, settings: AnalysisSettings) -> tuple[np.ndarray, dict]:
    """Per pump_id: last oil temperature, typical (median over the recent window), oil data of the last reading;
    the pumps (sorted) and each column as an array in their order.

    Plain arrays, sorted once by pump and time (a grouped frame costs more than the sums, for one pump as for many).
    """
    lo, hi = settings.temp_range_c
    t = column_floats(readings["temp_c"])
    keep = np.flatnonzero((t >= lo) & (t <= hi))
    pump_ids, taken_at = readings["pump_id"].to_numpy(), readings["taken_at"].to_numpy()
    order = keep[np.lexsort((taken_at[keep], pump_ids[keep]))]  # stable: by pump, then time
    pumps, group = np.unique(pump_ids[order], return_inverse=True)
    taken = taken_at[order]
    last = np.flatnonzero(np.r_[group[1:] != group[:-1], True]) if len(order) else np.zeros(0, dtype=np.int64)
    window = pd.Timedelta(days=settings.typical_window_days).to_timedelta64()
    recent = taken >= (taken[last] - window)[group]
    temps = t[order]
    return pumps, {
        "oil_temp_c": temps[last],
        "oil_temp_typical_c": group_median(group[recent], temps[recent], len(pumps)),
        "nu40": readings["nu40"].to_numpy(dtype=float)[order][last],
        "nu100": readings["nu100"].to_numpy(dtype=float)[order][last],
    }


def _positions(keys: np.ndarray, targets: np.ndarray) -> np.ndarray:
    """Each target's position among ``keys`` (sorted and unique, as np.unique gives them), -1 where it is not one
    of them (a missing target too): what pd.Index(keys).get_indexer(targets) gives, with no index built."""
    targets = np.asarray(targets)
    if len(keys) == 0:
        return np.full(len(targets), -1, dtype=np.intp)
    at = np.minimum(np.searchsorted(keys, targets), len(keys) - 1)
    return np.where(keys[at] == targets, at, -1).astype(np.intp)


def _taken(values: np.ndarray, at: np.ndarray, missing) -> np.ndarray:
    """values at positions ``at`` (one per pump), ``missing`` where a position is -1 (as a reindex fills it)."""
    if len(values) == 0:
        return np.full(len(at), missing, dtype=values.dtype)
    return np.where(at >= 0, values[np.maximum(at, 0)], missing).astype(values.dtype)


@lru_cache(maxsize=1)
def _no_time_dtype() -> np.dtype:
    """The dtype pandas gives a column of missing times (what a pump without any lab result gets)."""
    return pd.to_datetime(pd.Series([np.nan], dtype=object)).dtype


def oil_columns(pumps: pd.DataFrame, readings: pd.DataFrame, samples, now, settings: AnalysisSettings) -> dict:
    """Each pump's oil condition, OIL_COLUMNS as a dict in the pumps' order: arrays, and the pumps'
    cleanliness_target column as they have it (a Series, its dtype kept). The engine frames them once with the
    pump rows.

    A lab result belongs to a reservoir (machine), so each pump takes its current machine's latest result; the
    pumps are found among the machines and among the readings' temperatures by a sorted search (_positions).
    Water above the limit: common practice, no source (about 400-500 ppm for mineral oil)."""
    pump_ids = pumps["pump_id"].to_numpy()
    n = len(pump_ids)
    if samples is None or len(samples) == 0:
        no_time = np.full(n, np.datetime64("NaT"), dtype=_no_time_dtype())
        lab = {"sample_sampled_at": no_time, "sample_reported_at": no_time, "lab_pending_since": no_time,
               "c4": np.full(n, np.nan), "c6": np.full(n, np.nan), "c14": np.full(n, np.nan),
               "water_ppm": np.full(n, np.nan), "low_count": np.zeros(n, bool), "lab_late": np.zeros(n, bool)}
    else:
        machines, columns = latest_lab_results(samples, now, settings)
        at = _positions(machines, column_floats(pumps["machine_id"]))
        lab = {name: _taken(values, at, False if values.dtype == bool else
                            np.datetime64("NaT") if values.dtype.kind == "M" else np.nan)
               for name, values in columns.items()}
    with_temps, temps = oil_temperatures(readings, settings)
    at = _positions(with_temps, pump_ids)
    temps = {name: _taken(values, at, np.nan) for name, values in temps.items()}

    codes = np.column_stack([lab["c4"], lab["c6"], lab["c14"]])
    target = pumps["cleanliness_target"]
    targets = np.array([_target_channels(x) for x in target], dtype=float).reshape(-1, 3)
    steps = np.asarray(steps_over_channels(codes, targets), dtype=float).reshape(-1)
    code_text = [
        _code_text(c4, c6, c14, low)
        for c4, c6, c14, low in zip(codes[:, 0], codes[:, 1], codes[:, 2], lab["low_count"], strict=True)
    ]
    typical = temps["oil_temp_typical_c"]
    nu_typical = np.asarray(kinematic_viscosity_cst(typical, temps["nu40"], temps["nu100"]))
    last_temp = temps["oil_temp_c"]
    water = lab["water_ppm"]
    return {
        "sample_sampled_at": lab["sample_sampled_at"],
        "sample_reported_at": lab["sample_reported_at"],
        "cleanliness_code": code_text,
        "cleanliness_target": target,
        "cleanliness_steps_over": steps,
        "low_count": lab["low_count"],
        "water_ppm": water,
        "water_high": water > settings.water_limit_ppm,
        "lab_late": lab["lab_late"],
        "lab_pending_since": lab["lab_pending_since"],
        "oil_temp_c": last_temp,
        "oil_temp_typical_c": typical,
        "oil_hot": last_temp > column_floats(pumps["oil_temp_max_c"]),
        "oil_cold": last_temp < column_floats(pumps["oil_temp_min_c"]),
        "oil_life_factor": np.asarray(oil_life_factor(typical), dtype=float),
        "viscosity_typical_cst": nu_typical,
        "viscosity_window": np.where(np.isfinite(nu_typical), np.asarray(viscosity_window_flag(nu_typical)), None),
    }
