"""Values as JSON can carry them, in one place: no NaN or infinity (null instead), no numpy scalars, times as text.

``plain`` gives the Python value (a datetime stays a datetime: for checks and sums); ``json_ready`` goes on to
text for times and walks dicts and lists (for JSON columns, pages' twins and the analysis records).
"""

from datetime import date, datetime
from typing import Any

import numpy as np
import pandas as pd


def plain(value: Any) -> Any:
    """A scalar as plain Python: NaN, NaT, infinity -> None; numpy -> Python; a pandas time -> datetime."""
    if value is None or value is pd.NaT:
        return None
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    if isinstance(value, np.datetime64):
        return None if np.isnat(value) else pd.Timestamp(value).to_pydatetime()
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def json_ready(value: Any, dates_only: bool = False) -> Any:
    """``plain``, then times as ISO text ('YYYY-MM-DD' with ``dates_only``), through dicts, lists and arrays."""
    if isinstance(value, dict):
        return {str(k): json_ready(v, dates_only) for k, v in value.items()}
    if isinstance(value, list | tuple | np.ndarray):
        return [json_ready(v, dates_only) for v in value]
    value = plain(value)
    if isinstance(value, datetime | date):
        return value.strftime("%Y-%m-%d") if dates_only else value.isoformat()
    if value is None or isinstance(value, str | bool | int | float):
        return value
    return None if pd.isna(value) else str(value)
