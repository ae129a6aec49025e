"""Column by column equality of the engine's frames to 1e-9 relative: the check that two paths through the engine
(one pump or many, the plain per-member fits or the blocked ones) give the same figures."""

import numpy as np
import pandas as pd
import pytest


def same_column(expected: pd.Series, got: pd.Series, where: str, atol: float = 1e-9) -> None:
    """Numbers to rel 1e-9 (and `atol`), NaN and infinities in the same places; times equal; other cells equal,
    missing as None and numbers inside a dict (the law weights) to the same tolerance."""
    if pd.api.types.is_float_dtype(expected) or pd.api.types.is_float_dtype(got):
        x, y = expected.to_numpy(dtype=float), got.to_numpy(dtype=float)
        assert np.array_equal(np.isnan(x), np.isnan(y)), where
        assert np.array_equal(np.isinf(x), np.isinf(y)), where
        finite = np.isfinite(x)
        np.testing.assert_allclose(y[finite], x[finite], rtol=1e-9, atol=atol, err_msg=where)
    elif pd.api.types.is_datetime64_any_dtype(expected) or pd.api.types.is_datetime64_any_dtype(got):
        assert list(pd.to_datetime(expected)) == list(pd.to_datetime(got)), where
    else:
        assert [plain(v, atol) for v in got] == [plain(v, atol) for v in expected], where


def same_frames(expected: pd.DataFrame, got: pd.DataFrame, what: str, atol: float = 1e-9) -> None:
    assert list(got.columns) == list(expected.columns), what
    assert list(got.index) == list(expected.index), what
    for column in expected.columns:
        same_column(expected[column], got[column], f"{what} {column}", atol)


def plain(value, atol: float = 1e-9):
    """A cell to compare: missing as None, numbers (also inside a dict of weights) to rel 1e-9."""
    if isinstance(value, dict):
        return {k: plain(v, atol) for k, v in value.items()}
    if value is None or value is pd.NaT or (isinstance(value, float) and np.isnan(value)):
        return None
    if isinstance(value, float | np.floating):
        return pytest.approx(float(value), rel=1e-9, abs=atol)
    return value
