"""The grouped reductions the engine runs on plain arrays give what pandas' groupby gives (the reference), for a
pump's few intervals and for a fleet's many groups alike, missing values skipped."""

import numpy as np
import pandas as pd
import pytest

from fleet.trend.grouped import (
    group_first,
    group_max,
    group_median,
    group_min,
    group_time_max,
    pair_codes,
    time_span_days,
)


@pytest.mark.parametrize("n_groups", [1, 3, 600])
def test_reductions_match_pandas_groupby(n_groups):
    rng = np.random.default_rng(n_groups)
    group = rng.integers(0, n_groups, 5000)
    values = rng.normal(size=5000).round(1)  # rounding makes ties, as repeated readings do
    values[::9] = np.nan
    empty = n_groups + 2  # two trailing groups without rows: NaN, as reindex gives
    by = pd.Series(values).groupby(group)
    for ours, theirs in ((group_median, by.median()), (group_max, by.max()), (group_min, by.min()),
                         (group_first, by.first())):
        expected = theirs.reindex(range(empty)).to_numpy(dtype=float)
        np.testing.assert_array_equal(ours(group, values, empty), expected)  # pandas, exactly


def test_times_and_pairs_match_pandas():
    times = pd.to_datetime(["2025-01-01 08:00", None, "2025-01-03 20:30", "2025-01-02 00:00"]).to_numpy()
    group = np.array([0, 0, 0, 1])
    frame = pd.DataFrame({"g": group, "t": times})
    latest = frame.groupby("g")["t"].max().reindex(range(3)).to_numpy()
    np.testing.assert_array_equal(group_time_max(group, times, 3), latest)
    span = (frame.groupby("g")["t"].max() - frame.groupby("g")["t"].min()).dt.total_seconds() / 86400.0
    np.testing.assert_array_equal(time_span_days(group, times, 3), span.reindex(range(3)).to_numpy())
    pumps, intervals = np.array([7, 3, 7, 7, 3]), np.array([1, 0, 0, 1, 0])
    pairs, codes = pair_codes(pumps, intervals)
    keys = pd.DataFrame({"p": pumps, "i": intervals}).drop_duplicates().sort_values(["p", "i"]).to_numpy()
    np.testing.assert_array_equal(pairs, keys)
    np.testing.assert_array_equal(pairs[codes], np.column_stack([pumps, intervals]))


@pytest.mark.parametrize("size", [0, 1, 2, 7, 520])
def test_one_groups_median_matches_pandas(size):
    # one group (a pump with one interval) takes its own path: its values sorted once
    rng = np.random.default_rng(size)
    values = rng.normal(size=size).round(1)
    values[::5] = np.nan
    expected = pd.Series(values, dtype=float).median()  # pandas skips the missing values; NaN with none left
    np.testing.assert_array_equal(group_median(np.zeros(size, dtype=np.int64), values, 1), [expected])


@pytest.mark.parametrize("case", ["fleet", "late_pass", "one_long_group", "infinite"])
def test_median_of_groups_in_order_matches_pandas(case):
    # Group codes in order (a part's readings pump by pump, or the few groups a late reweighting pass keeps)
    # take a path of their own: each group's values sorted in a row. Reference: pandas' grouped median, exactly.
    rng = np.random.default_rng(len(case))
    n_groups = 600
    sizes = rng.integers(1, 40, n_groups)
    if case == "late_pass":  # a few groups left, codes with gaps between them
        sizes[rng.random(n_groups) < 0.97] = 0
    if case == "one_long_group":  # rows would be mostly padding: pandas' own path
        sizes[7] = 5000
    group = np.repeat(np.arange(n_groups), sizes)
    values = np.abs(rng.normal(size=len(group))).round(1)  # ties, as repeated readings make
    values[::7] = np.nan
    if case == "infinite":
        values[::11] = np.inf
    expected = pd.Series(values).groupby(group).median().reindex(range(n_groups + 2)).to_numpy(dtype=float)
    np.testing.assert_array_equal(group_median(group, values, n_groups + 2), expected)
