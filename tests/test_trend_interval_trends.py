"""The kept interval trends' match of each fitted interval to its service interval, against the pandas steps it
replaced (a reindex of the intervals on their (pump_id, interval_no) keys, flags filled False), kept here as the
reference."""

import numpy as np
import pandas as pd
import pytest

from fleet.trend.interval_trends import _bools, _rows_of, interval_trends


def _reference(fits: pd.DataFrame, intervals: pd.DataFrame) -> pd.DataFrame:
    start = intervals.set_index(["pump_id", "interval_no"])[["start_hours", "is_current"]]
    keys = pd.MultiIndex.from_arrays([fits["pump_id"].to_numpy(), fits["interval_no"].to_numpy()])
    here = start.reindex(keys)
    return pd.DataFrame({
        "is_current": here["is_current"].astype("boolean").fillna(False).to_numpy(bool),
        "start_hours": here["start_hours"].to_numpy(float),
        "enough_data": pd.Series(fits["slip_enough_data"]).astype("boolean").fillna(False).to_numpy(bool),
    })


@pytest.mark.parametrize("seed", range(5))
def test_rows_matched_as_the_pandas_reindex_did(seed):
    rng = np.random.default_rng(seed)
    n_pumps = int(rng.integers(1, 30))
    per_pump = rng.integers(1, 5, n_pumps)
    pump_id = np.repeat(rng.choice(10_000, n_pumps, replace=False), per_pump)
    interval_no = np.concatenate([np.arange(k) for k in per_pump])
    intervals = pd.DataFrame({"pump_id": pump_id, "interval_no": interval_no,
                              "start_hours": rng.uniform(0, 9_000, len(pump_id)),
                              "is_current": rng.random(len(pump_id)) < 0.5}).sample(frac=1.0, random_state=seed)
    # fitted intervals: some of the intervals, and some that are not among them (a key the reindex leaves NaN)
    take = rng.random(len(intervals)) < 0.7
    fits = pd.DataFrame({
        "pump_id": np.concatenate([pump_id[take], [20_001, int(pump_id[0])]]),
        "interval_no": np.concatenate([interval_no[take], [0, 99]]),
        "current_hours": 1.0, "slip_n_points": 5, "slip_enough_data": rng.random(int(take.sum()) + 2) < 0.5,
    })
    ours = interval_trends(fits, intervals, 0.9)
    ref = _reference(fits, intervals)
    for column in ref.columns:
        np.testing.assert_array_equal(ours[column].to_numpy(), ref[column].to_numpy(), err_msg=column)
    assert ours["fit"].iloc[0]["slip_n_points"] == fits["slip_n_points"].iloc[0]


def test_flags_with_gaps_are_false_as_pandas_fills_them():
    flags = pd.Series([True, None, False], dtype=object)
    np.testing.assert_array_equal(_bools(flags), pd.Series(flags).astype("boolean").fillna(False).to_numpy(bool))
    np.testing.assert_array_equal(_bools(np.array([True, False])), [True, False])


def test_a_repeated_interval_key_is_refused_as_a_reindex_refuses_it():
    keys = np.array([3, 3]), np.array([0, 0])
    with pytest.raises(ValueError, match="repeated"):
        _rows_of(*keys, np.array([3]), np.array([0]))
    with pytest.raises(ValueError):  # the reference refuses it too
        pd.DataFrame({"a": [1.0, 2.0]}, index=pd.MultiIndex.from_arrays(keys)).reindex(
            pd.MultiIndex.from_arrays([[3], [0]]))
