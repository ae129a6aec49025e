"""Reductions of a value per group over plain arrays (group codes 0..n_groups-1), for one pump or many alike.

What pandas' groupby gives (missing values skipped; NaN for a group with none), without building a Series and
a grouper per call: the engine calls these hundreds of times per analysis, mostly on one pump's readings.
"""

import numpy as np
import pandas as pd


def pair_codes(first: np.ndarray, second: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct (first, second) integer pairs, sorted (shape (n, 2)), and each row's code 0..n-1 among them."""
    first, second = np.asarray(first, dtype=np.int64), np.asarray(second, dtype=np.int64)
    if len(first) and second.min() >= 0 and first.min() >= 0 and first.max() < 2**62 // (int(second.max()) + 1):
        # One integer key per pair, same order: sorting plain integers is far faster than sorting rows.
        width = int(second.max()) + 1
        keys, codes = np.unique(first * width + second, return_inverse=True)
        return np.column_stack([keys // width, keys % width]), codes.reshape(-1)
    unique, codes = np.unique(np.column_stack([first, second]), axis=0, return_inverse=True)
    return unique.reshape(-1, 2), codes.reshape(-1)


def group_time_max(group: np.ndarray, times: np.ndarray, n_groups: int, smallest: bool = False) -> np.ndarray:
    """The latest (or earliest) time of each group, missing times skipped; NaT for a group with none."""
    known = ~np.isnat(times)
    ticks = times.view(np.int64)
    fill = np.iinfo(np.int64).max if smallest else np.iinfo(np.int64).min
    out = np.full(n_groups, fill, dtype=np.int64)
    (np.minimum if smallest else np.maximum).at(out, group[known], ticks[known])
    out = out.view(times.dtype)
    out[np.bincount(group[known], minlength=n_groups) == 0] = np.datetime64("NaT")
    return out


_FEW_GROUPS = 16  # up to this many groups (a pump's intervals) a plain sort beats building a pandas grouper


def group_max(group: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    out = np.full(n_groups, np.nan)
    np.fmax.at(out, group, values)  # fmax skips NaN
    return out


def group_min(group: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    out = np.full(n_groups, np.nan)
    np.fmin.at(out, group, values)
    return out


def group_first(group: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    """The first non-missing value of each group in the arrays' order."""
    known = ~np.isnan(values)
    codes, first = np.unique(group[known], return_index=True)
    out = np.full(n_groups, np.nan)
    out[codes] = values[known][first]
    return out


def seconds(ticks: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Differences of ``times``' integer ticks in seconds, as pandas' Timedelta.total_seconds gives them."""
    per_second = np.timedelta64(1, "s") // np.timedelta64(1, np.datetime_data(times.dtype)[0])
    return ticks / per_second


def time_span_days(group: np.ndarray, times: np.ndarray, n_groups: int) -> np.ndarray:
    """Days from each group's earliest to its latest time; NaN for a group without times."""
    first = group_time_max(group, times, n_groups, smallest=True)
    last = group_time_max(group, times, n_groups)
    ticks = np.where(np.isnat(last), 0, last.view(np.int64) - first.view(np.int64))
    return np.where(np.isnat(last), np.nan, seconds(ticks, times) / 86400.0)


def within_days_of_last(group: np.ndarray, times: np.ndarray, n_groups: int, days: float) -> np.ndarray:
    """Rows whose time is no more than ``days`` before their group's latest time (False for a missing time)."""
    latest = group_time_max(group, times, n_groups)[group]
    return ~np.isnat(times) & (times >= latest - np.timedelta64(pd.Timedelta(days=days)))


def group_median(group: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    """The median of each group: the middle value, or the mean of the two middle ones, of its sorted values."""
    if n_groups > _FEW_GROUPS:  # many groups (a fleet)
        out = _sorted_groups_median(group, values, n_groups)
        if out is not None:
            return out
        # pandas' grouped median needs no sort of all the values
        return pd.Series(values).groupby(group).median().reindex(range(n_groups)).to_numpy(dtype=float)
    known = ~np.isnan(values)
    g, v = group[known], values[known]
    if n_groups == 1:  # one group (a pump with one interval): its values sorted, its middle ones
        v = np.sort(v)
        n = len(v)
        return np.array([(v[(n - 1) // 2] + v[n // 2]) / 2 if n else np.nan])
    v = v[np.lexsort((v, g))]  # by group, then by value: each group's values in order
    counts = np.bincount(g, minlength=n_groups)
    starts = np.cumsum(counts) - counts
    has = counts > 0
    out = np.full(n_groups, np.nan)
    low, high = (starts + (counts - 1) // 2)[has], (starts + counts // 2)[has]
    out[has] = (v[low] + v[high]) / 2
    return out


def _sorted_groups_median(group: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray | None:
    """group_median where the group codes run in order (as a part's readings do, pump by pump, and any subset of
    them): each group's values in a row of its own (padded with +inf after them), the rows sorted, each row's
    middle ones picked; None where the codes are not in order or the rows would be mostly padding. The median is
    the middle value (odd count) or the mean of the two middle ones (even), as pandas takes it, so the figures are
    pandas' to the last bit; on a fleet's readings the sorts cost less than pandas' grouper, and on the few groups
    of a late reweighting pass far less."""
    known = ~np.isnan(values)
    if not known.all():
        group, values = group[known], values[known]
    out = np.full(n_groups, np.nan)
    if not len(values):
        return out
    if np.any(group[1:] < group[:-1]):
        return None
    starts = np.flatnonzero(np.concatenate(([True], group[1:] != group[:-1])))
    counts = np.diff(np.append(starts, len(values)))
    width = int(counts.max())
    if width * len(starts) > 4 * len(values) + 4096:
        return None
    block = np.full((len(starts), width), np.inf)  # a real +inf sorts among the padding: the same value
    block.ravel()[np.arange(len(values)) + np.repeat(np.arange(len(starts)) * width - starts, counts)] = values
    block.sort(axis=1)
    rows = np.arange(len(starts))
    low, high = block[rows, (counts - 1) // 2], block[rows, counts // 2]
    out[group[starts]] = np.where(counts % 2 == 1, high, (low + high) / 2)
    return out
