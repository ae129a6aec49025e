"""Each service interval's fitted wear trend, as plain rows to keep beside the analysis.

A chart of a pump's trend needs the fitted lines (every wear law's, fleet.trend.wear_laws), where the averaged
trend crosses its limit, and the interval's hours; with these kept, the band is drawn from the kept lines alone
(fleet.trend.remaining_life.trend_band), with no readings and no fitting.
"""

from collections.abc import Mapping

import numpy as np
import pandas as pd

from fleet.jsonvalues import json_ready

# Figures of the slip trend kept per interval besides its wear-law lines (columns of FleetAnalysis.fits).
SLIP_FIGURES = ("n_points", "span_hours", "a", "b", "current_lpm", "start_lpm", "wear_law", "crossing_hours",
                "crossing_low", "crossing_high", "enough_data")
DRAIN_FIGURES = ("n_points", "enough_data", "current_lpm", "crossing_hours", "crossing_low", "crossing_high")


def interval_trends(fits: Mapping, intervals: pd.DataFrame, confidence: float) -> pd.DataFrame:
    """One row per fitted pump interval: pump_id, interval_no, is_current, start_hours, current_hours,
    enough_data (the slip has a trend) and fit, a JSON-ready dict of the slip's wear-law lines (slip_<member>_<a,
    b, var_a, var_b, cov_ab, dof, weight>, slip_hours_scale, slip_hours_offset), its figures, the drain's
    summary figures and the confidence the crossing bounds were computed at.

    fits: the columns of FleetAnalysis.fits by name, in its order (FleetAnalysis.fit_columns, which frames none of
    the members' hundreds of lines; the frame itself serves too); intervals: FleetAnalysis.intervals.
    """
    columns = ["pump_id", "interval_no", "is_current", "start_hours", "current_hours", "enough_data", "fit"]
    if len(fits["pump_id"]) == 0:
        return pd.DataFrame(columns=columns)
    start = intervals.set_index(["pump_id", "interval_no"])[["start_hours", "is_current"]]
    keys = pd.MultiIndex.from_arrays([np.asarray(fits["pump_id"]), np.asarray(fits["interval_no"])])
    here = start.reindex(keys)
    kept = [c for c in fits.keys() if c.startswith("slip_") and (
        c.removeprefix("slip_") in SLIP_FIGURES or "_weight" in c or c.endswith(
            ("_a", "_b", "_var_a", "_var_b", "_cov_ab", "_dof", "_hours_scale", "_hours_offset")))]
    kept += [f"drain_{name}" for name in DRAIN_FIGURES if f"drain_{name}" in fits]
    # Every kept column as one object table (numbers NaN -> None, bools, JSON-ready text), numbers in one block:
    # a row's dict is then one zip, with no lookup or check per cell.
    n_rows = len(fits["pump_id"])
    table = np.empty((n_rows, len(kept)), dtype=object)
    # Each distinct dtype judged once (most columns are the members' float lines).
    dtypes = [fits[name].dtype for name in kept]
    kinds = {dtype: ("bool" if pd.api.types.is_bool_dtype(dtype) else
                     "number" if pd.api.types.is_numeric_dtype(dtype) else "other") for dtype in set(dtypes)}
    kind = [kinds[dtype] for dtype in dtypes]
    numeric = [j for j, k in enumerate(kind) if k == "number"]
    if numeric:
        numbers = np.column_stack([np.asarray(fits[kept[j]], dtype=float) for j in numeric])
        table[:, numeric] = np.where(np.isfinite(numbers), numbers, None)
    for j, name in enumerate(kept):
        if kind[j] == "bool":
            table[:, j] = np.asarray(fits[name], dtype=bool).tolist()
        elif kind[j] == "other":
            table[:, j] = json_ready(fits[name].tolist())
    keys = ["confidence", *kept]
    values = [dict(zip(keys, (confidence, *row), strict=True)) for row in table.tolist()]
    return pd.DataFrame({
        "pump_id": np.asarray(fits["pump_id"], dtype=np.int64),
        "interval_no": np.asarray(fits["interval_no"], dtype=np.int64),
        "is_current": here["is_current"].astype("boolean").fillna(False).to_numpy(bool),
        "start_hours": here["start_hours"].to_numpy(float),
        "current_hours": np.asarray(fits["current_hours"], dtype=float),
        "enough_data": pd.Series(fits["slip_enough_data"]).astype("boolean").fillna(False).to_numpy(bool),
        "fit": values,
    }, columns=columns)


def fit_row(stored: dict, interval_no: int, start_hours, current_hours) -> pd.Series:
    """A kept fit back as one row of FleetAnalysis.fits, as trend_band and the pump page read it (missing -> NaN)."""
    row = {k: (np.nan if v is None else v) for k, v in stored.items()}
    row.update(interval_no=interval_no, start_hours=np.nan if start_hours is None else start_hours,
               current_hours=np.nan if current_hours is None else current_hours)
    return pd.Series(row, dtype=object)
