"""A kind's refit (fleet.services.analysis.store.refit_kinds) reads its pumps, their stored ages and its service
lives in two plain queries and fits on arrays; it must store exactly what the plainer code before it stored. That
code is kept here as the reference: the kinds' pumps, their lives and their stored analyses read in three queries,
framed with pandas, fitted by the pandas loop per kind fit_fleet_priors ran before (also kept here, and
fit_fleet_priors compared with it) and summed by fleet.trend.engine.prior_figures.
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
from fleet.trend.weibull import fit_fleet_priors, fit_weibull


def _reference_fit_fleet_priors(lives, kind_of_pump, min_failures=3):
    """fit_fleet_priors as it stood before it handed plain arrays to fit_kind_priors: a pandas loop per kind."""
    data = lives.assign(kind=lives["pump_id"].map(kind_of_pump))
    rows = []
    for kind in sorted(kind_of_pump.dropna().unique()):
        d = data[data["kind"] == kind]
        n_fail, n_susp = int(d["failed"].sum()), int((~d["failed"]).sum())
        row = {"kind": kind, "beta": np.nan, "alpha": np.nan, "b10_hours": np.nan, "n_failures": n_fail,
               "n_suspensions": n_susp, "note": None}
        if n_fail < min_failures:
            row["note"] = (f"No fleet life figures for {kind}: {n_fail} completed interval"
                           f"{'s' if n_fail != 1 else ''} on record, {min_failures} needed.")
        else:
            fit = fit_weibull(d["life_hours"], d["failed"], d["entry_hours"])
            row.update(beta=fit.beta, alpha=fit.alpha, b10_hours=fit.b10_hours)
        rows.append(row)
    columns = ["kind", "beta", "alpha", "b10_hours", "n_failures", "n_suspensions", "note"]
    return pd.DataFrame(rows, columns=columns).set_index("kind")


def _reference_refit(session, kinds, now, settings) -> None:
    """refit_kinds as it stood before it read fewer queries and fitted on arrays (its fit the pandas loop)."""
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
    priors = _reference_fit_fleet_priors(lives, kind_of, settings.min_weibull_failures)
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


def test_fleet_priors_on_arrays_equal_the_pandas_loop():
    # Invented lives drawn with scipy.stats.weibull_min, three kinds, some pumps without a kind, in any order.
    from scipy import stats

    rng = np.random.default_rng(5)
    n = 600
    lives = pd.DataFrame({"pump_id": rng.integers(0, 200, n), "entry_hours": np.where(rng.random(n) < 0.2, 50.0, 0.0),
                          "life_hours": 60.0 + stats.weibull_min.rvs(1.8, scale=20_000.0, size=n, random_state=rng),
                          "failed": rng.random(n) < 0.6})
    kind_of = pd.Series(rng.choice(np.array(["vane", "external_gear", "lobe"], dtype=object), 200), dtype=object)
    kind_of.iloc[::9] = None
    kind_of.iloc[kind_of.index[kind_of == "lobe"][2:]] = "vane"  # lobe keeps two pumps: too few failures, maybe
    for frame in (lives, lives.iloc[::-1].reset_index(drop=True), lives.iloc[:5]):
        want = _reference_fit_fleet_priors(frame, kind_of, 3)
        got = fit_fleet_priors(frame, kind_of, 3)
        pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert want.index.tolist() == ["external_gear", "lobe", "vane"]
    assert np.isfinite(_reference_fit_fleet_priors(lives, kind_of, 3).loc["vane", "beta"])
