"""Oil condition per pump: its machine's latest lab result and the temperature it runs at."""

import numpy as np
import pandas as pd
import pytest

from fleet.trend.oil_condition import _positions, column_floats, latest_lab_results, oil_columns, plain_floats
from fleet.trend.settings import AnalysisSettings

NOW = pd.Timestamp("2025-06-30")


def _samples():
    return pd.DataFrame(
        {
            "machine_id": [1, 1, 1, 2],
            "sampled_at": pd.to_datetime(["2025-03-01", "2025-05-01", "2025-06-25", "2025-05-20"]),
            "reported_at": pd.to_datetime(["2025-03-10", "2025-05-12", None, None]),
            "code_4": [18.0, 19.0, np.nan, np.nan],
            "code_6": [16.0, 17.0, np.nan, np.nan],
            "code_14": [13.0, 14.0, np.nan, np.nan],
            "low_count": [False, True, False, False],
            "water_ppm": [100.0, 650.0, np.nan, np.nan],
            "viscosity_40": [46.0, 45.0, np.nan, np.nan],
        }
    )


def test_latest_reported_sample_and_late_results():
    machines, lab = latest_lab_results(_samples(), NOW, AnalysisSettings())
    one, two = machines.tolist().index(1), machines.tolist().index(2)
    assert lab["sample_sampled_at"][one] == pd.Timestamp("2025-05-01")  # the June sample is still at the lab
    assert not lab["lab_late"][one]  # ...but only 5 days, inside the 14 days allowed
    assert lab["lab_late"][two]  # sampled 41 days ago, never reported
    assert np.isnan(lab["c6"][two])


def test_pump_takes_its_machines_result_against_its_own_target():
    pumps = pd.DataFrame(
        {
            "pump_id": [10, 11],
            "machine_id": [1, 2],
            "cleanliness_target": ["18/16/13", "17/15/12"],
            "oil_temp_max_c": 80.0,
            "oil_temp_min_c": 10.0,
        }
    )
    readings = pd.DataFrame(
        {
            "pump_id": [10, 10, 10, 11],
            "taken_at": pd.to_datetime(["2025-06-01", "2025-06-10", "2025-06-20", "2025-06-20"]),
            "temp_c": [68.0, 70.0, 84.0, 40.0],
            "nu40": 46.0,
            "nu100": 6.8,
        }
    )
    columns = oil_columns(pumps, readings, _samples(), NOW, AnalysisSettings())
    columns["cleanliness_target"] = columns["cleanliness_target"].to_numpy()  # the pumps' own, in their order
    oil = pd.DataFrame(columns, index=pd.Index(pumps["pump_id"].to_numpy(), name="pump_id"))
    # ISO 4406: 19/17/14 against 18/16/13 is one scale step over on every channel.
    assert oil.loc[10, "cleanliness_code"] == "19/17/≥14" and oil.loc[10, "cleanliness_steps_over"] == 1
    assert oil.loc[10, "low_count"]
    assert oil.loc[10, "water_high"]  # 650 ppm > 500 ppm, common practice, no source
    assert oil.loc[10, "oil_hot"] and oil.loc[10, "oil_temp_c"] == 84.0
    # Oil life halves per 10 degC above 60 degC (common practice, no source): typical 70 degC -> 0.5.
    assert oil.loc[10, "oil_temp_typical_c"] == 70.0
    assert oil.loc[10, "oil_life_factor"] == pytest.approx(0.5)
    # VG 46 (nu100 6.8, from memory) at 70 degC is 14.85 cSt (domain.md sec. 3): below the 16-36 cSt band.
    assert oil.loc[10, "viscosity_typical_cst"] == pytest.approx(14.85, abs=0.02)
    assert oil.loc[10, "viscosity_window"] == "thin"
    assert pd.isna(oil.loc[11, "cleanliness_code"]) and oil.loc[11, "lab_late"]
    assert oil.loc[11, "oil_life_factor"] == 1.0  # no credit below 60 degC


def test_numbers_read_as_pandas_to_numeric_reads_them():
    """Reference: pd.to_numeric(errors="coerce"), which the plain casts stand in for (numpy numbers, objects that
    are all plain numbers or None) and which reads everything else itself."""
    columns = [
        pd.Series([1.5, np.nan, -0.0]), pd.Series([3, 4, 5]), pd.Series([True, False, True]),
        pd.Series([None, 2, 7.25], dtype=object), pd.Series([np.int64(2), np.float64(0.1), None], dtype=object),
        pd.Series(["1.5", None, "x"], dtype=object), pd.Series([True, None, 1.0], dtype=object),
        pd.Series([1.0, None, 3.0], dtype="Float64"), pd.Series([], dtype=object),
    ]
    for column in columns:
        want = pd.to_numeric(column, errors="coerce").to_numpy(dtype=float)
        assert column_floats(column).tobytes() == want.tobytes(), column.tolist()
        if isinstance(column.dtype, np.dtype):
            assert plain_floats(column.to_numpy()).tobytes() == want.tobytes(), column.tolist()


def test_positions_are_those_of_get_indexer():
    """Reference: pandas' Index.get_indexer, which each pump's machine and readings were found by."""
    rng = np.random.default_rng(3)
    for size in (0, 1, 2, 50):
        keys = np.unique(rng.integers(0, 80, size))
        for targets in (rng.integers(-5, 90, 40), rng.integers(0, 80, 40).astype(float),
                        np.array([np.nan, 1.5, 3.0, 79.0, 80.0])):
            assert _positions(keys, targets).tolist() == pd.Index(keys).get_indexer(targets).tolist()
