"""The shape prior pooled per pump kind (fleet.trend.shape_prior), checked against independent computations:
the mixing distribution against a direct maximisation by scipy.optimize, the member weights against Bayes' rule
written out here, and the end-to-end option against the flat prior on invented pumps (trend_synthetic; all data
invented)."""

import numpy as np
import pandas as pd
import trend_synthetic as ts
from scipy import optimize, special

from fleet.trend.engine import analyze_fleet
from fleet.trend.settings import AnalysisSettings
from fleet.trend.shape_prior import (
    ALL_KINDS,
    PRIOR_FLOOR_SHARE,
    fit_shape_priors,
    marginal_law_score,
    member_log_prior,
    mixing_distribution,
)
from fleet.trend.wear_laws import LAWS, MEMBERS, fit_wear_laws

POWER = np.flatnonzero([m.law == "power" for m in MEMBERS])
RUN_IN = np.flatnonzero([m.law == "run_in" for m in MEMBERS])


def _log_likelihood(prior, like, counts):
    return float(np.sum(counts * np.log(like @ prior)))


def test_mixing_distribution_is_the_maximum_likelihood_one_found_by_scipy_optimize():
    # The NPMLE of a mixing distribution on a fixed grid (Laird 1978, J. Am. Stat. Assoc. 73: 805-811):
    # max sum_i c_i ln(sum_j pi_j L_ij) over the simplex. Independent computation: scipy.optimize.minimize
    # (BFGS) on a softmax parametrisation of pi. The objective is concave in pi, so both reach one maximum.
    rng = np.random.default_rng(5)
    true = np.array([0.6, 0.3, 0.1])
    member = rng.choice(3, size=400, p=true)
    centre = np.array([0.0, 1.0, 2.0])
    x = centre[member] + rng.normal(0.0, 0.7, 400)  # each row's datum, its member's mean plus noise
    like = np.exp(-0.5 * ((x[:, None] - centre[None, :]) / 0.7) ** 2)
    counts = rng.uniform(0.5, 1.0, 400)

    em = mixing_distribution(like, counts)
    found = optimize.minimize(lambda v: -_log_likelihood(special.softmax(np.r_[0.0, v]), like, counts),
                              np.zeros(2), method="BFGS")
    direct = special.softmax(np.r_[0.0, found.x])
    assert np.isclose(em.sum(), 1.0)
    assert np.allclose(em, direct, atol=2e-3), (em, direct)
    assert _log_likelihood(em, like, counts) >= -found.fun - 1e-6


def test_rows_without_likelihood_or_weight_have_no_say():
    like = np.array([[1.0, 0.0], [0.0, 0.0], [0.0, 1.0]])
    # the all-zero row and the zero-count row are left out: the one remaining row puts all mass on column 0
    prior = mixing_distribution(like, np.array([1.0, 5.0, 0.0]))
    assert prior[0] > 0.999 and np.isclose(prior.sum(), 1.0)


def _grouped_power_readings(rng, n_groups=12, n=20, power=2.2):
    """Invented intervals wearing by q = 1 + 3 u^power with 1 % noise."""
    group = np.repeat(np.arange(n_groups), n)
    hours = np.tile(np.linspace(100.0, 8000.0, n), n_groups)
    q = 1.0 + 3.0 * (hours / 8000.0) ** power
    q = q * (1.0 + rng.normal(0.0, 0.01, q.size))
    return group, hours, q


def test_member_weights_are_prior_times_likelihood_and_the_law_weights_are_untouched():
    # Bayes' rule written out: within a family w_j = pi_j exp(-s_j / 2) / sum_k pi_k exp(-s_k / 2), with s_j
    # the member's n ln(D / n) (one K in a family, so exp(-s_j / 2) is its likelihood up to one factor).
    rng = np.random.default_rng(11)
    group, hours, q = _grouped_power_readings(rng)
    n_groups = 12
    fits = fit_wear_laws(group, hours, q, lambda _f: 0.01 * q, np.full(q.size, 1e-3), n_groups, AnalysisSettings())
    flat_laws = fits.law_weights()
    prior = np.ones(len(MEMBERS))
    for cols in (POWER, RUN_IN):
        raw = rng.uniform(0.1, 1.0, len(cols))
        prior[cols] = raw / raw.sum()
    log_prior = np.tile(np.log(prior), (n_groups, 1))
    fits.weigh(fits.law_score, fits.member_score, log_prior)

    for law, cols in (("power", POWER), ("run_in", RUN_IN)):
        score = np.where(fits.usable[:, cols], fits.member_score[:, cols], np.inf)
        post = prior[cols] * np.exp(-0.5 * (score - score.min(axis=1, keepdims=True)))
        post = post / post.sum(axis=1, keepdims=True)
        law_w = fits.law_weights()[law]
        expected = law_w[:, None] * post
        assert np.allclose(fits.weight[:, cols], expected, atol=2e-6 * law_w.max()), law
    for law in LAWS:
        assert np.allclose(fits.law_weights()[law], flat_laws[law], atol=1e-6), law


def test_pooled_prior_finds_the_exponent_the_intervals_share():
    # Every invented interval accelerates with the exponent 2.2 (between the grid's 2.0 and 2.38): pooled, the
    # prior puts most of the power law's mass on those two members, far above the flat prior's 2 / 14.
    rng = np.random.default_rng(3)
    group, hours, q = _grouped_power_readings(rng, n_groups=40)
    fits = fit_wear_laws(group, hours, q, lambda _f: 0.01 * q, np.full(q.size, 1e-3), 40, AnalysisSettings())
    kinds = np.array(["axial_piston"] * 30 + ["vane"] * 10, dtype=object)
    priors = fit_shape_priors(fits.law_score, fits.member_score, fits.usable, kinds, min_intervals=15.0)
    power = priors.iloc[:, POWER]
    near = [j for j, m in enumerate(m for m in MEMBERS if m.law == "power") if 1.9 < m.power < 2.5]
    assert power.loc["axial_piston"].iloc[near].sum() > 0.6, power.loc["axial_piston"]
    # Every family's row is a distribution, each member at least its floor.
    for cols in (POWER, RUN_IN):
        block = priors.iloc[:, cols].to_numpy()
        assert np.allclose(block.sum(axis=1), 1.0)
        assert (block >= PRIOR_FLOOR_SHARE / len(cols) / block.shape[1]).all()
    # The vane kind's 10 intervals hold under 15 intervals' worth of weight: it takes the pooled row.
    assert np.allclose(priors.loc["vane"].to_numpy(), priors.loc[ALL_KINDS].to_numpy())
    # A kind the priors do not hold takes the pooled row too; the single members' log prior is 0.
    logs = member_log_prior(priors, np.array(["gear_unknown"], dtype=object))
    assert np.allclose(logs[0], np.log(priors.loc[ALL_KINDS].to_numpy()))
    assert np.allclose(logs[0, :2], 0.0)


def test_too_few_intervals_in_the_whole_fleet_leaves_the_prior_flat():
    rng = np.random.default_rng(4)
    group, hours, q = _grouped_power_readings(rng, n_groups=3)
    fits = fit_wear_laws(group, hours, q, lambda _f: 0.01 * q, np.full(q.size, 1e-3), 3, AnalysisSettings())
    priors = fit_shape_priors(fits.law_score, fits.member_score, fits.usable, np.array(["a"] * 3, dtype=object),
                              min_intervals=20.0)
    assert np.allclose(priors.iloc[:, POWER].to_numpy(), 1.0 / len(POWER))
    assert np.allclose(priors.iloc[:, RUN_IN].to_numpy(), 1.0 / len(RUN_IN))


def test_marginal_law_score_integrates_the_shape_out_under_its_prior():
    # Written out here with scipy.special.logsumexp: a family's fit term -2 ln sum_j pi_j exp(-s_j / 2), and
    # the AICc penalty 2K + 2K(K + 1) / (n - K - 1) (Burnham & Anderson 2002, sec. 2.4; cited from memory) with
    # K one less than with the best member fitted (the shape is integrated, not estimated).
    rng = np.random.default_rng(13)
    group, hours, q = _grouped_power_readings(rng, n_groups=6)
    fits = fit_wear_laws(group, hours, q, lambda _f: 0.01 * q, np.full(q.size, 1e-3), 6, AnalysisSettings())
    prior = rng.uniform(0.1, 1.0, len(MEMBERS))
    for cols in (POWER, RUN_IN):
        prior[cols] /= prior[cols].sum()
    log_prior = np.tile(np.log(prior), (6, 1))
    got = marginal_law_score(fits.law_score, fits.member_score, fits.usable, log_prior, [fits.n_points])

    def aicc_penalty(n, k):
        return 2 * k + 2 * k * (k + 1) / (n - k - 1)

    n = fits.n_points
    for law, cols, k in (("power", POWER, 4), ("run_in", RUN_IN, 5)):
        score = np.where(fits.usable[:, cols], fits.member_score[:, cols], np.inf)
        fit_term = -2.0 * special.logsumexp(np.log(prior[cols]) - 0.5 * score, axis=1)
        expected = fit_term + aicc_penalty(n, k - 1)
        assert np.allclose(got[:, LAWS.index(law)], expected, rtol=1e-10), law
        # with a flat prior the integrated fit term is never below the best member's (an average of likelihoods)
        assert (fit_term >= score.min(axis=1) - 1e-9).all()
    for law in ("exponential", "linear"):
        assert np.array_equal(got[:, LAWS.index(law)], fits.law_score[:, LAWS.index(law)])


def test_pooled_option_moves_the_forecast_and_keeps_the_band():
    # Invented accelerating pumps (exponent 2.2, readings over 60 % of the life to the limit). The pooled prior
    # reweighs the shapes the forecast follows; the band stays the flat prior's, so it is the same.
    rng = np.random.default_rng(29)
    n = 40
    pumps = ts.make_pumps(n, rng)
    eta_new = rng.uniform(0.94, 0.96, n)
    crossing = rng.uniform(7000.0, 12000.0, n)
    ratio = (1 - ts.ETA_LIMIT) / (1 - eta_new)
    per_day = 0.6 * crossing / (39 * 7.0)
    readings = ts.wear_readings(pumps, rng, n_readings=40, eta_new=eta_new, hours_per_day=per_day,
                                wear=lambda i, h: 1 + (ratio[i] - 1) * (h / crossing[i]) ** 2.2)
    now = readings["taken_at"].max() + pd.Timedelta(days=1)
    flat = analyze_fleet(pumps, readings, None, None, now=now, settings=AnalysisSettings()).results
    pooled = analyze_fleet(pumps, readings, None, None, now=now,
                           settings=AnalysisSettings(shape_prior="pooled", shape_prior_min_intervals=10.0)).results
    # Where the forecast follows the same law, the band is the flat prior's own.
    same = flat["wear_law"] == pooled["wear_law"]
    assert same.mean() >= 0.8, same.mean()
    for col in ("hours_to_limit_low", "hours_to_limit_high"):
        pd.testing.assert_series_equal(flat.loc[same, col], pooled.loc[same, col], check_exact=False, rtol=1e-9)
    moved = (pooled["hours_to_limit"] - flat["hours_to_limit"]).abs() / flat["hours_to_limit"]
    assert (moved > 1e-4).any(), moved.describe()
    remaining = pd.Series(crossing, index=pumps["pump_id"]) - pooled["interval_hours"]
    error = {name: ((res["hours_to_limit"] - remaining).abs() / remaining).median()
             for name, res in (("flat", flat), ("pooled", pooled))}
    assert error["pooled"] <= error["flat"] + 0.01, error  # a shared exponent: pooling must not hurt


def test_calibration_own_shape_prior_sits_on_the_member_nearest_the_true_shape():
    # The diagnostic --shape-known of benchmarks/calibration.py: each invented pump's prior on its own shape.
    from benchmarks.calibration import invented_fleet, own_shape_priors

    _, _, _, truth = invented_fleet(2024, 40)
    priors = own_shape_priors(truth)
    power = np.array([m.power for m in MEMBERS])
    for pump_id, row in truth.iterrows():
        prior = priors.loc[pump_id].to_numpy()
        for cols in (POWER, RUN_IN):
            assert np.isclose(prior[cols].sum(), 1.0, rtol=1e-9)
        if row["law"] == "accelerating":
            top = POWER[np.argmax(prior[POWER])]
            # the nearest exponent on the grid's log scale (its steps are 2^(1/4))
            assert abs(np.log(power[top] / row["power"])) <= np.log(2.0) / 8 + 1e-12, (power[top], row["power"])
            assert prior[top] > 0.999
        elif row["law"] == "run_in":
            assert prior[RUN_IN].max() > 0.999
        else:
            assert np.allclose(prior[POWER], 1.0 / len(POWER))
    assert np.allclose(priors.loc[ALL_KINDS].to_numpy()[POWER], 1.0 / len(POWER))
