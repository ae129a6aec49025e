"""Fleet life figures (2-parameter Weibull), checked against domain.md sec. 5, lifelines and scipy."""

import numpy as np
import pandas as pd
import pytest
from lifelines import WeibullFitter
from scipy import integrate, stats

from fleet.trend.weibull import (
    conditional_failure_probability,
    expected_overhauls,
    fit_fleet_priors,
    fit_weibull,
    mean_residual_life,
)

# Check data, domain.md sec. 5 (computed with scipy): hours between overhauls.
FAILURES = np.array([1200.0, 2100.0, 2900.0, 3600.0, 4400.0, 5200.0])
SUSPENSIONS = np.array([3000.0, 4000.0, 6000.0])


def test_failures_only_match_domain_values():
    fit = fit_weibull(FAILURES, np.ones(6, dtype=bool))
    # domain.md sec. 5: beta 2.656, alpha 3648 h, B10 1564 h.
    assert fit.beta == pytest.approx(2.656, abs=1e-3)
    assert fit.alpha == pytest.approx(3648, abs=1)
    assert fit.b10_hours == pytest.approx(1564, abs=1)
    assert (fit.n_failures, fit.n_suspensions) == (6, 0)


def test_with_suspensions_match_domain_values_and_lifelines():
    t = np.concatenate([FAILURES, SUSPENSIONS])
    failed = np.r_[np.ones(6, dtype=bool), np.zeros(3, dtype=bool)]
    fit = fit_weibull(t, failed)
    # domain.md sec. 5: with suspensions beta 2.291, alpha 4698 h.
    assert fit.beta == pytest.approx(2.291, abs=1e-3)
    assert fit.alpha == pytest.approx(4698, abs=1)
    ref = WeibullFitter().fit(t, event_observed=failed)  # lifelines: lambda_ = alpha, rho_ = beta
    assert fit.alpha == pytest.approx(ref.lambda_, rel=1e-4)
    assert fit.beta == pytest.approx(ref.rho_, rel=1e-4)


def test_left_truncated_fit_matches_lifelines_entry():
    rng = np.random.default_rng(11)
    life = stats.weibull_min.rvs(2.0, scale=5000.0, size=300, random_state=rng)
    entry = np.where(rng.uniform(size=300) < 0.3, rng.uniform(0, 1500, 300), 0.0)
    keep = life > entry
    t, t0 = life[keep], entry[keep]
    censor_at = rng.uniform(2000, 12000, keep.sum())
    failed = t <= censor_at
    t = np.minimum(t, censor_at)
    fit = fit_weibull(t, failed, t0)
    ref = WeibullFitter().fit(t, event_observed=failed, entry=t0)  # lifelines with left truncation
    assert fit.alpha == pytest.approx(ref.lambda_, rel=1e-3)
    assert fit.beta == pytest.approx(ref.rho_, rel=1e-3)


def test_mean_residual_life_matches_numerical_integration():
    beta, alpha = 2.656, 3648.0
    for t in (0.0, 1000.0, 3000.0, 8000.0):
        sf = stats.weibull_min(beta, scale=alpha).sf  # scipy reference survival function
        expected = integrate.quad(sf, t, np.inf)[0] / sf(t)
        assert mean_residual_life(t, beta, alpha) == pytest.approx(expected, rel=1e-6)
    # At age 0 it is the mean life, alpha Gamma(1 + 1/beta).
    assert mean_residual_life(0.0, beta, alpha) == pytest.approx(stats.weibull_min(beta, scale=alpha).mean())
    # Far in the tail the closed form underflows; the asymptote 1/hazard takes over without a warning.
    far = mean_residual_life(60000.0, beta, alpha)
    assert np.isfinite(far) and 0 < far < 500


def test_conditional_probability_matches_scipy_survival():
    beta, alpha, t, dt = 2.291, 4698.0, 3000.0, 1000.0
    sf = stats.weibull_min(beta, scale=alpha).sf
    assert conditional_failure_probability(t, dt, beta, alpha) == pytest.approx(1 - sf(t + dt) / sf(t), rel=1e-12)


def test_fleet_priors_per_kind_need_three_failures():
    lives = pd.DataFrame(
        {
            "pump_id": [1, 1, 2, 3, 4, 5, 6, 7],
            "entry_hours": 0.0,
            "life_hours": [1200.0, 2100.0, 2900.0, 3600.0, 4400.0, 5200.0, 3000.0, 800.0],
            "failed": [True, True, True, True, True, True, False, True],
        }
    )
    kinds = pd.Series({1: "vane", 2: "vane", 3: "vane", 4: "vane", 5: "vane", 6: "vane", 7: "external_gear"})
    priors = fit_fleet_priors(lives, kinds, min_failures=3)
    assert priors.loc["vane", "n_failures"] == 6 and priors.loc["vane", "n_suspensions"] == 1
    assert priors.loc["vane", "beta"] > 1
    gear = priors.loc["external_gear"]
    assert np.isnan(gear["beta"]) and "1 completed interval on record, 3 needed" in gear["note"]
    exp = expected_overhauls([1000.0, 0.0], [500.0, 500.0], ["vane", "external_gear"], priors)
    p = priors.loc["vane"]
    assert exp["vane"] == pytest.approx(conditional_failure_probability(1000.0, 500.0, p["beta"], p["alpha"]))
    assert np.isnan(exp["external_gear"])


def test_engine_fits_the_fleet_prior_from_overhaul_history():
    import trend_synthetic as ts

    from fleet.trend.engine import analyze_fleet

    rng = np.random.default_rng(31)
    n = 8
    pumps = ts.make_pumps(n, rng)
    per_day = 16.0
    first_life_days = rng.integers(100, 300, n)  # invented overhaul dates
    before = ts.wear_readings(
        pumps,
        rng,
        n_readings=45,
        every_days=7.0,
        eta_new=np.full(n, 0.95),
        growth_per_h=np.full(n, 5e-5),
        hours_per_day=np.full(n, per_day),
    )
    overhaul_at = ts.START + pd.to_timedelta(first_life_days, unit="D") + pd.Timedelta(hours=12)
    overhaul_hours = first_life_days * per_day + 8.0
    events = pd.DataFrame(
        {"pump_id": pumps["pump_id"], "date": overhaul_at, "hours": overhaul_hours, "kind": "overhaul", "cost": 4000.0}
    )
    now = before["taken_at"].max() + pd.Timedelta(days=1)
    analysis = analyze_fleet(pumps, before, events, None, now=now)
    prior = analysis.priors.loc["axial_piston"]
    assert (prior["n_failures"], prior["n_suspensions"]) == (n, n)
    # Lives by hand: failures at the overhaul hours (meter from new), suspensions = hours run since.
    last_hours = before.groupby("pump_id")["hours"].max().to_numpy()
    durations = np.r_[overhaul_hours, last_hours - overhaul_hours]
    observed = np.r_[np.ones(n, dtype=bool), np.zeros(n, dtype=bool)]
    ref = WeibullFitter().fit(durations, event_observed=observed)  # lifelines reference
    assert prior["alpha"] == pytest.approx(ref.lambda_, rel=1e-3)
    assert prior["beta"] == pytest.approx(ref.rho_, rel=1e-3)
    res = analysis.results
    age = last_hours - overhaul_hours
    assert np.allclose(res["age_hours"], age)
    assert np.allclose(res["prior_hours_to_overhaul"], mean_residual_life(age, prior["beta"], prior["alpha"]))
    horizon_h = 12 * 7 * res["hours_per_day"].to_numpy()
    expected = conditional_failure_probability(age, horizon_h, prior["beta"], prior["alpha"]).sum()
    assert prior["expected_overhauls_in_horizon"] == pytest.approx(expected)


def _reference_prior_figures(kinds, age, horizon, priors):
    """fleet.trend.engine.prior_figures as it was written on frames (a reindex per pump kind, a grouped sum
    reindexed to the priors): the reference the array code must equal to the last bit."""
    fleet_priors = priors.copy()
    kinds = np.asarray(kinds, dtype=object)
    kind_prior = fleet_priors.reindex(kinds)
    hours = mean_residual_life(age, kind_prior["beta"].to_numpy(float), kind_prior["alpha"].to_numpy(float))
    p = fleet_priors.reindex(kinds)
    prob = conditional_failure_probability(age, horizon, p["beta"].to_numpy(), p["alpha"].to_numpy())
    expected = pd.Series(prob).groupby(kinds).sum(min_count=1)
    fleet_priors["expected_overhauls_in_horizon"] = expected.reindex(fleet_priors.index)
    return hours, kind_prior["b10_hours"].to_numpy(float), fleet_priors


@pytest.mark.parametrize("n", [1, 2, 3, 40, 400])
def test_prior_figures_equal_the_frame_reference(n):
    """Reference: the frame code above; pumps of fitted kinds, of a kind without a fit, of a kind the priors lack
    and without a kind, one pump alone (its own chance, a zero horizon giving -0.0) or many."""
    from fleet.trend.engine import prior_figures

    priors = pd.DataFrame({"beta": [1.4, np.nan, 2.2], "alpha": [40000.0, np.nan, 25000.0],
                           "b10_hours": [8000.0, np.nan, 9000.0], "n_failures": [9, 1, 5],
                           "n_suspensions": [3, 0, 2], "note": [None, "too few", None]},
                          index=pd.Index(["vane", "radial_piston", "axial_piston"], name="kind"))
    rng = np.random.default_rng(n)
    choices = np.array(["vane", "radial_piston", "axial_piston", "screw", None], dtype=object)
    for trial in range(30):
        kinds = rng.choice(choices, n, p=[0.35, 0.15, 0.3, 0.1, 0.1])
        if n == 1:
            kinds = choices[[trial % len(choices)]]
        age = rng.uniform(0.0, 60000.0, n)
        horizon = np.where(rng.random(n) < 0.2, 0.0, rng.uniform(0.0, 5000.0, n))
        got = prior_figures(kinds, age, horizon, priors)
        want = _reference_prior_figures(kinds, age, horizon, priors)
        assert got[0].tobytes() == want[0].tobytes() and got[1].tobytes() == want[1].tobytes()
        pd.testing.assert_frame_equal(got[2], want[2], check_exact=True)
        assert np.signbit(got[2]["expected_overhauls_in_horizon"]).tolist() == \
            np.signbit(want[2]["expected_overhauls_in_horizon"]).tolist()
    assert "expected_overhauls_in_horizon" not in priors  # the priors given are left as they were
