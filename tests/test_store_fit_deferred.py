"""A reading lengthens its pump's running interval, a suspension in its kind's Weibull: the store defers the
kind's refit until those moves pass FIT_DRIFT of the fit's exposure, and meanwhile moves the kind's expected
overhauls in the horizon by the pump's share. The demo plant is invented; the synthetic lives are drawn with
scipy.stats.weibull_min."""


import numpy as np
import pytest
from scipy import stats
from sqlalchemy import select

from fleet.db.models import AnalysisResult, FleetPrior, Pump
from fleet.services.analysis import store
from fleet.trend.weibull import conditional_failure_probability, fit_weibull, mean_residual_life
from tests.posting import post_reading


def test_figures_move_less_than_a_few_times_the_exposure_share_moved():
    # 2,000 invented lives from a Weibull (beta 1.6, alpha 30,000 h) drawn by scipy; a third still running.
    rng = np.random.default_rng(7)
    lives = stats.weibull_min.rvs(1.6, scale=30_000.0, size=2000, random_state=rng)
    running = rng.random(2000) < 0.35
    lives[running] *= rng.random(running.sum())  # running intervals are cut short where they stand
    failed = ~running
    before = fit_weibull(lives, failed)
    grown = lives.copy()
    index = np.flatnonzero(running)[:40]
    grown[index] += 8.0  # forty rounds' readings, 8 h each
    share = np.abs((grown[index] / before.alpha) ** before.beta - (lives[index] / before.alpha) ** before.beta
                   ).sum() / before.n_failures
    after = fit_weibull(grown, failed)
    ages = np.array([100.0, 5_000.0, 20_000.0, 60_000.0])
    moved = max(abs(after.beta / before.beta - 1), abs(after.alpha / before.alpha - 1),
                abs(after.b10_hours / before.b10_hours - 1),
                np.abs(mean_residual_life(ages, after.beta, after.alpha)
                       / mean_residual_life(ages, before.beta, before.alpha) - 1).max())
    assert 0 < share < 1e-4
    assert moved < 5 * share  # what store.FIT_DRIFT's bound leans on


def _fitted_kind_pump(demo_db) -> tuple[str, str]:
    with demo_db.sessions() as session:
        fitted = [p.kind for p in session.scalars(select(FleetPrior)) if (p.detail or {}).get("beta") is not None]
        return session.execute(select(Pump.serial, Pump.kind).where(Pump.kind.in_(fitted)).order_by(Pump.serial)
                               .limit(1)).one()


def _expected_by_definition(demo_db, kind: str) -> tuple[float, dict]:
    """The kind's expected overhauls summed afresh from its stored pumps' ages and horizons with its stored fit
    (fleet.trend.weibull: the sum of P(overhaul within the horizon | age))."""
    with demo_db.sessions() as session:
        detail = session.get(FleetPrior, kind).detail
        rows = session.execute(select(AnalysisResult.age_hours, AnalysisResult.planning_horizon_hours)
                               .join(Pump, Pump.id == AnalysisResult.pump_id).where(Pump.kind == kind)).all()
    ages, horizons = (np.array(c, dtype=float) for c in zip(*rows, strict=True))
    shares = conditional_failure_probability(ages, horizons, detail["beta"], detail["alpha"])
    return float(np.nansum(shares)), detail


def test_a_reading_defers_the_refit_and_moves_the_expected_overhauls(client, demo_db, monkeypatch):
    serial, kind = _fitted_kind_pump(demo_db)
    refitted = []
    original = store.refit_kinds
    monkeypatch.setattr(store, "refit_kinds", lambda session, kinds, *a: (refitted.append(set(kinds)),
                                                                          original(session, kinds, *a)))
    monkeypatch.setattr(store, "FIT_DRIFT", 1.0)  # the demo's kinds are small: let every move wait
    fit_before = {k: v for k, v in _expected_by_definition(demo_db, kind)[1].items() if k in ("beta", "alpha")}
    post_reading(client, demo_db, serial, hours_added=8.0, flow_share=0.9, minutes_ago=30)
    assert kind not in set().union(*refitted)
    expected, detail = _expected_by_definition(demo_db, kind)
    assert {k: detail[k] for k in fit_before} == fit_before  # the fit waits
    assert detail[store.FIT_DRIFT_FIELD] > 0
    assert detail["expected_overhauls_in_horizon"] == pytest.approx(expected, rel=1e-9)
    monkeypatch.setattr(store, "FIT_DRIFT", 1e-12)  # now any growth passes the bound
    post_reading(client, demo_db, serial, hours_added=8.0, flow_share=0.9, minutes_ago=20)
    assert kind in refitted[-1]
    with demo_db.sessions() as session:
        assert store.FIT_DRIFT_FIELD not in session.get(FleetPrior, kind).detail
