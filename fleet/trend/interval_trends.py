"""Each service interval's fitted wear trend, as plain rows to keep beside the analysis.

A chart of a pump's trend needs the fitted lines (every wear law's, fleet.trend.wear_laws), where the averaged
trend crosses its limit, and the interval's hours; with these kept, the band is drawn from the kept lines alone
(fleet.trend.remaining_life.trend_band), with no readings and no fitting. A member of the wear laws whose weight is
exactly 0 (in the band's weights and the forecast's) moves neither, so its line is not kept: most members of a
fit carry none, and a whole fleet's kept fits shrink to about a third. fit_row gives such a member back with weight
0 and no line.
"""

from collections.abc import Mapping
from functools import lru_cache

import numpy as np
import pandas as pd

from fleet.jsonvalues import json_ready
from fleet.trend.grouped import pair_codes
from fleet.trend.wear_laws import CENTRE_FIELDS, FIELDS, MEMBERS

# Figures of the slip trend kept per interval besides its wear-law lines (columns of FleetAnalysis.fits).
SLIP_FIGURES = ("n_points", "span_hours", "a", "b", "current_lpm", "start_lpm", "wear_law", "crossing_hours",
                "crossing_low", "crossing_high", "enough_data")
_BOOL = np.dtype(bool)
DRAIN_FIGURES = ("n_points", "enough_data", "current_lpm", "crossing_hours", "crossing_low", "crossing_high")
# A member's fields a fit may keep (LawFits.line_fields): all of them where the member has weight, else none.
MEMBER_FIELDS = (*FIELDS, *CENTRE_FIELDS, "centre_weight")
_WEIGHTS = ("weight", "centre_weight")


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
    pump_id = np.asarray(fits["pump_id"], dtype=np.int64)
    interval_no = np.asarray(fits["interval_no"], dtype=np.int64)
    at = _rows_of(intervals["pump_id"].to_numpy(np.int64), intervals["interval_no"].to_numpy(np.int64), pump_id,
                  interval_no)
    found = at >= 0
    pick = np.where(found, at, 0)  # a missing interval takes row 0's figures, then blanked (there is one if found)
    if found.any():
        is_current = found & _bools(intervals["is_current"])[pick]
        start_hours = np.where(found, intervals["start_hours"].to_numpy(float)[pick], np.nan)
    else:
        is_current, start_hours = np.zeros(len(at), dtype=bool), np.full(len(at), np.nan)
    kept = _kept(tuple(fits.keys()))
    # Every kept column as one object table (numbers NaN -> None, bools, JSON-ready text), numbers in one block:
    # a row's dict is then one zip, with no lookup or check per cell.
    n_rows = len(fits["pump_id"])
    table = np.empty((n_rows, len(kept)), dtype=object)
    # Each distinct dtype judged once (most columns are the members' float lines).
    # A mapping that knows its columns' dtypes and gives many float columns at once (degradation.FitColumns) is
    # asked so; a frame, column by column.
    column_dtype = getattr(fits, "column_dtype", None) or (lambda name: fits[name].dtype)
    dtypes = [column_dtype(name) for name in kept]
    kinds = {dtype: ("bool" if pd.api.types.is_bool_dtype(dtype) else
                     "number" if pd.api.types.is_numeric_dtype(dtype) else "other") for dtype in set(dtypes)}
    kind = [kinds[dtype] for dtype in dtypes]
    numeric = [j for j, k in enumerate(kind) if k == "number"]
    if numeric:
        if hasattr(fits, "floats"):
            numbers = fits.floats([kept[j] for j in numeric])
        else:
            numbers = np.column_stack([np.asarray(fits[kept[j]], dtype=float) for j in numeric])
        table[:, numeric] = np.where(np.isfinite(numbers), numbers, None)
    for j, name in enumerate(kept):
        if kind[j] == "bool":
            table[:, j] = np.asarray(fits[name], dtype=bool).tolist()
        elif kind[j] == "other":
            table[:, j] = json_ready(fits[name].tolist())
    keys = ["confidence", *kept]
    held = _held_cells(kept, numbers if numeric else np.empty((n_rows, 0)), [kept[j] for j in numeric])
    if held is None:
        values = [dict(zip(keys, (confidence, *row), strict=True)) for row in table.tolist()]
    else:  # each row with only its weighed members' lines (a row of an object table, picked by its mask)
        names = np.array(keys, dtype=object)
        table = np.column_stack([np.full(n_rows, confidence, dtype=object), table])
        values = [dict(zip(names[at].tolist(), row[at].tolist(), strict=True))
                  for row, at in zip(table, np.column_stack([np.ones(n_rows, dtype=bool), held]), strict=True)]
    return pd.DataFrame({
        "pump_id": pump_id,
        "interval_no": interval_no,
        "is_current": is_current,
        "start_hours": start_hours,
        "current_hours": np.asarray(fits["current_hours"], dtype=float),
        "enough_data": _bools(fits["slip_enough_data"]),
        "fit": values,
    }, columns=columns)


@lru_cache(maxsize=8)
def _kept(names: tuple) -> list:
    """The columns of the fits kept per interval, in the fits' order: the slip's figures and wear-law lines, the
    drain's summary figures."""
    kept = [c for c in names if c.startswith("slip_") and (
        c.removeprefix("slip_") in SLIP_FIGURES or "_weight" in c or c.endswith(
            ("_a", "_b", "_var_a", "_var_b", "_cov_ab", "_dof", "_hours_scale", "_hours_offset")))]
    present = set(names)
    return kept + [f"drain_{name}" for name in DRAIN_FIGURES if f"drain_{name}" in present]


@lru_cache(maxsize=8)
def _member_of(kept: tuple) -> np.ndarray:
    """Per kept column the index in MEMBERS of the member whose line it holds; -1 for the interval's figures."""
    where = {f"slip_{m.name}_{f}": j for j, m in enumerate(MEMBERS) for f in MEMBER_FIELDS}
    return np.array([where.get(name, -1) for name in kept], dtype=np.int64)


def _held_cells(kept: list, numbers: np.ndarray, numeric: list) -> np.ndarray | None:
    """Per row and kept column: whether the row keeps it (False for the fields of a member whose weight, and
    centre weight where there is one, is exactly 0); None where the fits hold no member's line. The first member
    (the exponential law) is always kept: LawFits.from_columns reads from its fields which fields a fit has."""
    member_of = _member_of(tuple(kept))
    if not (member_of >= 0).any():
        return None
    weight, centre = _weight_columns(tuple(numeric))
    # a member without a weight column is kept; a missing (NaN) weight too, as it is
    live = (weight < 0)[None, :] | (numbers[:, weight] != 0.0)
    if (centre >= 0).any():
        live |= (centre >= 0)[None, :] & (numbers[:, centre] != 0.0)
    live[:, 0] = True
    return np.where(member_of >= 0, live[:, np.maximum(member_of, 0)], True)


@lru_cache(maxsize=8)
def _weight_columns(numeric: tuple) -> tuple[np.ndarray, np.ndarray]:
    """Per member (MEMBERS' order) the place among the numeric columns of its weight and of its centre weight,
    -1 where the fits have none."""
    at = {name: k for k, name in enumerate(numeric)}
    return tuple(np.array([at.get(f"slip_{m.name}_{w}", -1) for m in MEMBERS], dtype=np.int64) for w in _WEIGHTS)


def _bools(values) -> np.ndarray:
    """Flags as plain bools, a missing one False (as pandas' nullable "boolean" filled with False)."""
    if getattr(values, "dtype", None) == _BOOL:
        return np.asarray(values, dtype=bool)
    return pd.Series(values).astype("boolean").fillna(False).to_numpy(bool)


def _rows_of(pump_ids: np.ndarray, interval_nos: np.ndarray, want_pump: np.ndarray, want_no: np.ndarray) -> np.ndarray:
    """The row of each wanted (pump_id, interval_no) among the intervals' rows, -1 where there is none. The
    intervals' keys are unique (a service interval is one row); a repeated key raises, as a reindex on it would."""
    pairs, codes = pair_codes(np.concatenate([pump_ids, want_pump]), np.concatenate([interval_nos, want_no]))
    own = codes[:len(pump_ids)]
    if len(np.unique(own)) != len(own):
        raise ValueError("cannot match the fits to the service intervals: an interval's (pump_id, interval_no) "
                         "is repeated")
    row = np.full(len(pairs), -1, dtype=np.int64)
    row[own] = np.arange(len(own))
    return row[codes[len(pump_ids):]]


def fit_row(stored: dict, interval_no: int, start_hours, current_hours) -> pd.Series:
    """A kept fit back as one row of FleetAnalysis.fits, as trend_band and the pump page read it (missing -> NaN)."""
    row = {k: (np.nan if v is None else v) for k, v in stored.items()}
    _unweighed_members_back(row)
    row.update(interval_no=interval_no, start_hours=np.nan if start_hours is None else start_hours,
               current_hours=np.nan if current_hours is None else current_hours)
    return pd.Series(row, dtype=object)


def _unweighed_members_back(row: dict) -> None:
    """The members a kept fit left out (interval_trends: no weight) back in ``row`` with weight 0 and no line
    (NaN), each with the fields the first member has: every member in the arrays LawFits.from_columns builds."""
    fields = [f for f in MEMBER_FIELDS if f"slip_{MEMBERS[0].name}_{f}" in row]
    for member in MEMBERS[1:]:
        if fields and f"slip_{member.name}_weight" not in row:
            row.update({f"slip_{member.name}_{f}": 0.0 if f in _WEIGHTS else np.nan for f in fields})
