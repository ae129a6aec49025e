"""A kind's refit (fleet.services.analysis.store.refit_kinds) reads its pumps, their stored ages and its service
lives in two plain queries and fits on arrays; it must store exactly what the plainer code before it stored. That
code is kept here as the reference: the kinds' pumps, their lives and their stored analyses read in three queries,
framed with pandas, fitted by fleet.trend.weibull.fit_fleet_priors and summed by fleet.trend.engine.prior_figures.
The comparison is to the last bit (common practice, no source: a reference implementation kept beside the fast
one). The demo plant is invented."""

import math

import numpy as np
import pandas as pd
from sqlalchemy import delete, insert, select

from fleet.db.models import AnalysisResult, FleetPrior, Pump, ServiceLife
from fleet.jsonvalues import json_ready
from fleet.services.analysis import store
from fleet.timeutil import utcnow
from fleet.trend.engine import prior_figures
from fleet.trend.settings import AnalysisSettings
from fleet.trend.weibull import fit_fleet_priors


def _reference_refit(session, kinds, now, settings) -> None:
    """refit_kinds as it stood before it read fewer queries and fitted on arrays."""
    kinds = sorted(k for k in kinds if k)
    if not kinds:
        return
    kind_of = pd.Series(dict(store._plain_rows(session, select(Pump.id, Pump.kind).where(Pump.kind.in_(kinds)))),
                        dtype=object)
    rows = store._plain_rows(session, select(
        ServiceLife.pump_id, ServiceLife.interval_no, ServiceLife.entry_hours, ServiceLife.life_hours,
        ServiceLife.failed).join(Pump, Pump.id == ServiceLife.pump_id).where(Pump.kind.in_(kinds)))
    pump_id, interval_no, entry, life, failed = (list(c) for c in zip(*rows, strict=True)) if rows else ([],) * 5
    order = np.lexsort((np.array(interval_no, dtype=np.int64), np.array(pump_id, dtype=np.int64)))
    lives = pd.DataFrame({"pump_id": np.array(pump_id, dtype=np.int64)[order],
                          "entry_hours": np.array(entry, dtype=float)[order],
                          "life_hours": np.array(life, dtype=float)[order],
                          "failed": np.array(failed, dtype=bool)[order]})
    priors = fit_fleet_priors(lives, kind_of, settings.min_weibull_failures)
    result = AnalysisResult.__table__
    stored = sorted(store._plain_rows(session, select(result.c.pump_id, Pump.kind, result.c.age_hours,
                                                      result.c.planning_horizon_hours)
                                      .join(Pump, Pump.id == result.c.pump_id).where(Pump.kind.in_(kinds))))
    if stored:
        _, kind, age, horizon = (np.array(c, dtype=object) for c in zip(*stored, strict=True))
        _, _, priors = prior_figures(kind, age.astype(float), horizon.astype(float), priors)
    else:
        priors["expected_overhauls_in_horizon"] = np.nan
    session.execute(delete(FleetPrior).where(FleetPrior.kind.in_(kinds)))
    if len(priors):
        session.execute(insert(FleetPrior), [
            {"kind": str(kind), "computed_at": now, "detail": json_ready(row.to_dict())}
            for kind, row in priors.iterrows()])
    session.flush()


def _stored_priors(session) -> dict:
    statement = select(FleetPrior).execution_options(populate_existing=True)
    return {prior.kind: dict(prior.detail) for prior in session.scalars(statement)}


def _both(demo_db, kinds, prepare=None) -> tuple[dict, dict]:
    """The fleet_prior rows each refit stores for ``kinds`` (after ``prepare``, if any), each in a transaction
    rolled back."""
    now, settings = utcnow(), AnalysisSettings()
    found = []
    for refit in (_reference_refit, store.refit_kinds):
        with demo_db.sessions() as session, session.begin():
            if prepare:
                prepare(session)
            refit(session, kinds, now, settings)
            found.append(_stored_priors(session))
            session.rollback()
    return found[0], found[1]


def _same_bits(a: dict, b: dict) -> bool:
    if a.keys() != b.keys():
        return False
    for kind in a:
        if a[kind].keys() != b[kind].keys():
            return False
        for field, value in a[kind].items():
            other = b[kind][field]
            if isinstance(value, float) and isinstance(other, float):
                if not (value == other or (math.isnan(value) and math.isnan(other))):
                    return False
            elif value != other:
                return False
    return True


def _kinds(demo_db) -> list[str]:
    with demo_db.sessions() as session:
        return sorted(set(session.scalars(select(Pump.kind))))


def test_each_kind_and_all_kinds_refit_as_the_reference(demo_db):
    kinds = _kinds(demo_db)
    fitted = 0
    for chosen in [[k] for k in kinds] + [kinds, kinds[:2], ["no_such_kind"]]:
        reference, mine = _both(demo_db, chosen)
        assert _same_bits(reference, mine), (chosen, reference, mine)
        fitted += sum(detail.get("beta") is not None for detail in mine.values())
    assert fitted > 0  # some kind of the demo plant has life figures, so the fit itself was compared


def test_pumps_without_a_stored_analysis_or_lives_refit_as_the_reference(demo_db):
    kinds = _kinds(demo_db)

    def without_some(session):  # a kind's pumps with no stored analysis; another kind's with no service lives
        first = select(Pump.id).where(Pump.kind == kinds[0]).scalar_subquery()
        session.execute(delete(AnalysisResult).where(AnalysisResult.pump_id.in_(first)))
        last = select(Pump.id).where(Pump.kind == kinds[-1]).scalar_subquery()
        session.execute(delete(ServiceLife).where(ServiceLife.pump_id.in_(last)))

    reference, mine = _both(demo_db, kinds, without_some)
    assert _same_bits(reference, mine), (reference, mine)
    assert mine[kinds[-1]]["n_failures"] == 0 and mine[kinds[-1]]["beta"] is None
