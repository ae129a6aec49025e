"""Each pump's effective limits (fleet.services.analysis.frames.effective_limits): its own value where set, else its
kind's stored default, else the built-in one, whether the frame holds one pump's row (the analysis after a write,
the pump page) or many. The built-in values are the project's table in fleet/limits.py; the cleaner target for a
variable piston pump is common practice, no source."""

import numpy as np
import pandas as pd

from fleet.limits import DEFAULT_LIMITS, VARIABLE_PISTON_TARGET
from fleet.services.analysis.frames import LIMIT_FIELDS, effective_limits


def _pumps() -> pd.DataFrame:
    pumps = pd.DataFrame({
        "pump_id": [1, 2, 3, 4, 5],
        "kind": ["axial_piston", "axial_piston", "radial_piston", "external_gear", "axial_piston"],
        "variable": [True, True, False, True, True],
        "cleanliness_target": [None, "15/13/10", None, None, None],
        "eta_v_limit": [None, 0.8, None, None, None],
    })
    for name in LIMIT_FIELDS:
        if name not in pumps:
            pumps[name] = None  # object columns of None, as a pump's row read from the database gives them
    return pumps


def _defaults(edited: dict | None = None) -> pd.DataFrame:
    defaults = pd.DataFrame({"kind": ["axial_piston", "radial_piston"], **{n: [None, None] for n in LIMIT_FIELDS}})
    for (kind, name), value in (edited or {}).items():
        defaults.loc[defaults["kind"] == kind, name] = value
    return defaults


def _plain(values: list) -> list:
    """None for a missing value (None or NaN), the value otherwise."""
    return [None if pd.isna(v) else v for v in values]


def test_own_value_then_the_kinds_stored_default_then_the_built_in_one():
    out = effective_limits(_pumps(), _defaults({("axial_piston", "eta_v_limit"): 0.83}))
    assert out["eta_v_limit"].tolist() == [0.83, 0.8, DEFAULT_LIMITS["radial_piston"].eta_v_limit,
                                           DEFAULT_LIMITS["external_gear"].eta_v_limit, 0.83]
    assert out["drain_limit_pct"].tolist()[2] == DEFAULT_LIMITS["radial_piston"].drain_limit_pct
    # Common practice, no source: a variable piston pump wants a cleaner code than the kind's plain default,
    # unless it set its own (pump 2); a fixed piston pump (3) and a gear pump (4) keep their kind's.
    assert out["cleanliness_target"].tolist() == [
        VARIABLE_PISTON_TARGET, "15/13/10", DEFAULT_LIMITS["radial_piston"].cleanliness_target,
        DEFAULT_LIMITS["external_gear"].cleanliness_target, VARIABLE_PISTON_TARGET]


def test_an_edited_kind_target_is_kept_for_a_variable_piston_pump():
    out = effective_limits(_pumps(), _defaults({("axial_piston", "cleanliness_target"): "16/14/11"}))
    assert out["cleanliness_target"].tolist()[0] == "16/14/11"


def test_one_pumps_row_gets_what_it_gets_among_many_and_a_missing_column_is_filled():
    pumps, defaults = _pumps(), _defaults()
    many = effective_limits(pumps, defaults)
    for at in range(len(pumps)):
        one = effective_limits(pumps.iloc[[at]], defaults)
        for name in LIMIT_FIELDS:
            assert _plain(one[name].tolist()) == _plain(many[name].tolist()[at:at + 1]), (at, name)
    without = effective_limits(pumps.drop(columns=["cleanliness_target", "eta_v_limit"]), defaults)
    assert without["cleanliness_target"].tolist()[3] == DEFAULT_LIMITS["external_gear"].cleanliness_target
    assert np.allclose(without["eta_v_limit"].astype(float), [DEFAULT_LIMITS[k].eta_v_limit for k in pumps["kind"]])


def test_one_rows_limits_framed_once_are_the_frame_paths_to_the_dtype():
    """effective_limits_of_one (the analysis after a write, the pump page) against effective_limits of a frame of
    that one row, the reference: every value and every column's dtype, own values given or not, edited kind
    defaults or not, a kind without built-in limits, a variable piston pump lifted or keeping its own target."""
    from pandas.testing import assert_frame_equal

    from fleet.services.analysis.frames import effective_limits_of_one

    for edited in ({}, {("axial_piston", "cleanliness_target"): "16/14/11", ("radial_piston", "eta_v_limit"): 0.82,
                        ("axial_piston", "reading_interval_days"): 7}):
        defaults = _defaults(edited)
        rows = [dict(zip(defaults.columns, values, strict=True)) for values in defaults.itertuples(index=False)]
        rows = [{k: (None if not isinstance(v, str) and pd.isna(v) else v) for k, v in row.items()} for row in rows]
        for _, pump in _pumps().iterrows():
            for kind in (pump["kind"], "no_such_kind"):
                row = {**{k: (None if not isinstance(v, str) and pd.isna(v) else v) for k, v in pump.items()},
                       "kind": kind, "displacement_cc": 28.0, "note": None}
                expected = effective_limits(pd.DataFrame([row]), pd.DataFrame(rows, columns=list(defaults.columns)))
                assert_frame_equal(effective_limits_of_one(row, rows), expected, check_exact=True, obj=str(row))
    assert effective_limits_of_one({**_pumps().iloc[0].to_dict(), "eta_v_limit": float("nan")}, []) is None
