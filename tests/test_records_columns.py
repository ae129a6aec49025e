"""Results rows as records, a column at a time: the same Python values, of the same types, as the value-by-value
code they replaced, and already JSON-ready (the spool writes them as JSON text without json_ready).

The reference is the project's earlier value-by-value conversion, kept here; times are checked against Python's
own datetime.strftime("%Y-%m-%d") (the standard library), floats by their bits. Data: the invented demo plant's
analysis, and a hand-made frame of invented values with every kind of missing cell.
"""

import datetime as dt
import struct

import numpy as np
import pandas as pd

from fleet.jsonvalues import json_ready
from fleet.services.analysis import spool
from fleet.services.analysis.compute import analyse_part
from fleet.services.analysis.store import NOT_IN_DETAIL
from fleet.trend import engine
from fleet.trend.engine import results_to_records
from fleet.trend.settings import AnalysisSettings

NOW = dt.datetime(2026, 12, 1, 12)


def reference_records(results: pd.DataFrame) -> list[dict]:
    """results_to_records as it was: every cell through _plain, one at a time."""
    frame = results.reset_index()
    names = [str(k) for k in frame.columns]
    columns = [[engine._plain(v) for v in values.tolist()] for _, values in frame.items()]
    return [dict(zip(names, row, strict=True)) for row in zip(*columns, strict=True)]


def _typed(value):
    """A value with its type, floats as their bits: True and 1, or 0.0 and -0.0, differ."""
    if isinstance(value, dict):
        return {k: _typed(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_typed(v) for v in value]
    if isinstance(value, float):
        return ("float", struct.pack("<d", value))
    return (type(value).__name__, value)


def _odd_frame(rows: int) -> pd.DataFrame:
    """Invented cells of every dtype the results hold, with their missing values, repeated to ``rows`` rows."""
    base = {
        "number": [1.5, np.nan, np.inf, -np.inf, -0.0, 0.1 + 0.2, 5e-324, 1e16],
        "small": np.array([1.5, np.nan, 2.25, np.inf, 0.0, -1.0, 3.0, 7.0], dtype=np.float32),
        "count": np.arange(8, dtype=np.int64) - 3,
        "unsigned": np.arange(8, dtype=np.uint32),
        "flag": [True, False, True, True, False, False, True, False],
        "text": pd.array(["a", None, "ü", "", "b", None, "c", "d"], dtype="str"),
        "object": ["x", None, {"linear": 0.5, "power": np.nan}, [1, np.float64(2.0)], np.nan, pd.NaT, 3, "y"],
        "when": np.array(["2026-01-31T23:59", "NaT", "1970-01-01", "2262-04-11", "2000-02-29T12:00", "NaT",
                          "2026-12-01", "1999-12-31T00:00:01"], dtype="datetime64[ns]"),
        "when_us": np.array(["2026-01-31T23:59", "NaT", "1969-12-31T23:00", "9999-12-31T10:00", "1200-05-05",
                             "2026-06-30", "NaT", "2100-01-01"], dtype="datetime64[us]"),
        "recent_us": np.array(["2026-01-31T23:59", "NaT", "1970-01-01", "9999-12-31T23:59", "2024-02-29",
                               "2026-06-30", "NaT", "2100-01-01"], dtype="datetime64[us]"),
        "never": np.array(["NaT"] * 8, dtype="datetime64[ns]"),
    }
    frame = pd.DataFrame(base)
    frame = pd.concat([frame] * (rows // len(frame) + 1), ignore_index=True).iloc[:rows]
    frame.index = pd.Index(range(100, 100 + rows), name="pump_id")
    return frame


def test_odd_cells_give_the_value_by_value_records():
    for rows in (3, 31, 32, 200):  # below and above the size at which columns go whole
        frame = _odd_frame(rows)
        records = results_to_records(frame)
        assert _typed(records) == _typed(reference_records(frame)), rows
        assert _typed([json_ready(r) for r in records]) == _typed(records), rows
    records = results_to_records(_odd_frame(40))
    # Python's strftime (standard library) for the dates; None for NaT, NaN and infinities.
    assert records[0]["when"] == dt.datetime(2026, 1, 31, 23, 59).strftime("%Y-%m-%d")
    assert records[2]["when_us"] == dt.datetime(1969, 12, 31, 23).strftime("%Y-%m-%d")
    assert records[3]["recent_us"] == "9999-12-31"
    assert [records[n]["number"] for n in (1, 2, 3)] == [None, None, None]
    assert records[1]["text"] is None and records[1]["when"] is None and records[0]["never"] is None
    assert records[1]["flag"] is False and records[1]["count"] == -2 and type(records[1]["count"]) is int


def test_a_part_of_the_demo_plant_gives_the_value_by_value_records_and_details(demo_db):
    with demo_db.sessions() as session, session.begin():
        ids = list(range(1, 42))
        part = analyse_part(session, ids, NOW, AnalysisSettings())
    assert len(part.results) == 41
    records = results_to_records(part.results)
    assert _typed(records) == _typed(reference_records(part.results))
    for record in records:  # the spool's detail text: as it was with json_ready, now without
        detail = {k: v for k, v in record.items() if k not in NOT_IN_DETAIL}
        assert spool.json_text(detail) == spool.json_text(json_ready(detail))


def test_one_pump_at_a_time_gives_the_value_by_value_records(demo_db):
    # A write's analysis holds one pump or a few: its rows go cell by cell from one object array (results_to_records'
    # few-rows path), which must give what the value-by-value reference gives.
    with demo_db.sessions() as session, session.begin():
        parts = [analyse_part(session, ids, NOW, AnalysisSettings()) for ids in ([1], [2], [7, 8, 9], [40, 41])]
    for part in parts:
        assert len(part.results) < engine._WHOLE_COLUMNS
        assert _typed(results_to_records(part.results)) == _typed(reference_records(part.results))
