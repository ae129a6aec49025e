"""Figures of a stored analysis derived when read rather than stored, so a store writes its own pumps' rows only.

- The rank in the service list: 1 + the number of smaller order keys (fleet.trend.status.service_order_keys;
  keys are unique, each ends with its pump's serial), which is service_rank's figure for the stored list. A row
  without a key (stored before keys existed, until the next store keys the list) has no rank.
- The prior figures (prior_hours_to_overhaul, prior_b10_hours): what the kind's stored fleet life figures
  (fleet_prior) say of the pump at its stored age, as fleet.trend.engine.prior_figures computes them in a full
  analysis (tests/test_write_invariant.py compares the two). A refit of a kind then rewrites one fleet_prior
  row, not the rows of its pumps.
"""

from collections.abc import Iterable

import numpy as np
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from fleet.db.models import AnalysisResult, FleetPrior
from fleet.jsonvalues import json_ready
from fleet.trend.weibull import mean_residual_life

PRIOR_FIGURES = ("prior_hours_to_overhaul", "prior_b10_hours")
# Up to this many pumps are ranked by an indexed count each; more by one pass over the keys in order.
COUNTED_ONE_BY_ONE = 8


def ranks(session: Session, pump_ids: Iterable[int] | None = None) -> dict[int, int]:
    """The service-list rank of each of ``pump_ids`` (every stored analysis when None) that has a key: for a few
    pumps an indexed count of smaller keys each, else one pass over the key index in order (at 10,000 pumps a
    few milliseconds, where a row_number() window or a count per row of a page took several times as long)."""
    if pump_ids is not None:
        pump_ids = [int(p) for p in pump_ids]
        if len(pump_ids) <= COUNTED_ONE_BY_ONE:
            return _counted(session, pump_ids)
    result = AnalysisResult.__table__
    ordered = session.connection().execute(select(result.c.pump_id).where(result.c.order_key.is_not(None))
                                           .order_by(result.c.order_key))
    try:  # the driver's rows as they come (ids only): no per-row Row objects for 10,000 rows
        rows = ordered.cursor.fetchall() if ordered.cursor is not None else []
    finally:
        ordered.close()
    found = {pump_id: rank for rank, (pump_id,) in enumerate(rows, start=1)}
    return found if pump_ids is None else {p: found[p] for p in pump_ids if p in found}


def _counted(session: Session, pump_ids: list[int]) -> dict[int, int]:
    result = AnalysisResult.__table__
    keys = dict(session.execute(select(result.c.pump_id, result.c.order_key)
                                .where(result.c.pump_id.in_(pump_ids), result.c.order_key.is_not(None))).all())
    return {pump_id: 1 + session.scalar(select(func.count()).select_from(result).where(result.c.order_key < key))
            for pump_id, key in keys.items()}


def prior_values(session: Session, kinds, ages) -> list[dict]:
    """Each pump's prior figures as JSON-ready values, from its kind and age: the per-pump part of
    fleet.trend.engine.prior_figures (the mean residual life at its age under its kind's Weibull, and the
    kind's B10), on the few stored numbers of each kind's fit (a frame of them cost more than the figures)."""
    kinds, ages = list(kinds), _numbers(ages)
    fits = {kind: detail or {} for kind, detail in session.execute(select(FleetPrior.kind, FleetPrior.detail))}

    def figure(kind, name):
        value = fits.get(kind, {}).get(name)
        return np.nan if value is None else float(value)

    beta = np.array([figure(k, "beta") for k in kinds], dtype=float)
    alpha = np.array([figure(k, "alpha") for k in kinds], dtype=float)
    b10 = [figure(k, "b10_hours") for k in kinds]
    hours = mean_residual_life(ages, beta, alpha) if kinds else []
    return [{"prior_hours_to_overhaul": json_ready(h), "prior_b10_hours": json_ready(b)}
            for h, b in zip(hours, b10, strict=True)]


def _numbers(values) -> np.ndarray:
    return np.array([np.nan if v is None else float(v) for v in values], dtype=float)
