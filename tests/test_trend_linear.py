"""The straight-line machinery behind the wear trends, checked against scipy and statsmodels."""

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, stats

from fleet.trend.linear import LineFit, fieller_crossing, grouped_wls, inverse_design, line_variance, t_quantile

# Regression check data, domain.md sec. 5 (synthetic, computed with scipy): eta_v % against running hours.
HOURS = np.arange(0.0, 3501.0, 500.0)
ETA_PCT = np.array([95.0, 94.6, 94.1, 93.9, 93.2, 92.9, 92.3, 92.0])


def _one_group_fit(x, y) -> LineFit:
    return grouped_wls(np.zeros(len(x), dtype=int), x, y, np.ones(len(x)), 1)


def test_ols_reproduces_the_domain_check_values():
    fit = _one_group_fit(HOURS, ETA_PCT)
    # domain.md sec. 5: OLS slope -8.7619e-4 %/h, intercept 95.0333.
    assert fit.b[0] == pytest.approx(-8.7619e-4, rel=1e-4)
    assert fit.a[0] == pytest.approx(95.0333, abs=1e-4)
    # domain.md sec. 5: 85 % is reached at 11 451.1 h (our crossing solver wants a rising line: use -eta).
    rising = _one_group_fit(HOURS, -ETA_PCT)
    x_hat, *_ = fieller_crossing(rising, -85.0, 0.90)
    assert x_hat[0] == pytest.approx(11451.1, abs=0.1)


def test_ols_matches_scipy_linregress_and_statsmodels():
    fit = _one_group_fit(HOURS, ETA_PCT)
    ref = stats.linregress(HOURS, ETA_PCT)  # scipy reference
    assert fit.b[0] == pytest.approx(ref.slope, rel=1e-12)
    assert fit.a[0] == pytest.approx(ref.intercept, rel=1e-12)
    assert np.sqrt(fit.var_b[0]) == pytest.approx(ref.stderr, rel=1e-9)
    assert np.sqrt(fit.var_a[0]) == pytest.approx(ref.intercept_stderr, rel=1e-9)
    ols = sm.OLS(ETA_PCT, sm.add_constant(HOURS)).fit()  # statsmodels reference
    cov = ols.cov_params()
    assert fit.cov_ab[0] == pytest.approx(cov[0, 1], rel=1e-9)
    assert fit.scale[0] ** 2 == pytest.approx(ols.scale, rel=1e-9)


def test_prediction_interval_at_5000h_matches_statsmodels_and_domain_values():
    fit = _one_group_fit(HOURS, ETA_PCT)
    x = 5000.0
    centre = fit.a[0] + fit.b[0] * x
    half = t_quantile(0.95, fit.dof)[0] * np.sqrt(line_variance(fit, x, 0) + fit.scale[0] ** 2)
    # domain.md sec. 5: 95 % prediction interval at 5000 h is [90.298, 91.007].
    assert centre - half == pytest.approx(90.298, abs=1e-3)
    assert centre + half == pytest.approx(91.007, abs=1e-3)
    ols = sm.OLS(ETA_PCT, sm.add_constant(HOURS)).fit()
    frame = ols.get_prediction(np.array([[1.0, x]])).summary_frame(alpha=0.05)
    assert centre - half == pytest.approx(frame["obs_ci_lower"].iloc[0], rel=1e-10)
    assert centre + half == pytest.approx(frame["obs_ci_upper"].iloc[0], rel=1e-10)
    mean_half = t_quantile(0.95, fit.dof)[0] * np.sqrt(line_variance(fit, x, 0))
    assert centre + mean_half == pytest.approx(frame["mean_ci_upper"].iloc[0], rel=1e-10)


def test_fieller_bounds_are_where_the_statsmodels_mean_band_meets_the_limit():
    # Inverse prediction: the bounds of the crossing are where the confidence band of the mean line
    # (statsmodels get_prediction, mean_ci) reaches the limit. Solved independently with scipy brentq.
    y = -ETA_PCT
    fit = _one_group_fit(HOURS, y)
    x_hat, x_low, x_high, bounded = fieller_crossing(fit, -85.0, 0.90)
    ols = sm.OLS(y, sm.add_constant(HOURS)).fit()

    def band(x, edge):
        return ols.get_prediction(np.array([[1.0, x]])).summary_frame(alpha=0.10)[edge].iloc[0] + 85.0

    low_ref = optimize.brentq(band, 4000.0, x_hat[0], args=("mean_ci_upper",))
    high_ref = optimize.brentq(band, x_hat[0], 30000.0, args=("mean_ci_lower",))
    assert bounded[0]
    assert x_low[0] == pytest.approx(low_ref, rel=1e-7)
    assert x_high[0] == pytest.approx(high_ref, rel=1e-7)
    assert x_low[0] < x_hat[0] < x_high[0]


def test_flat_or_uncertain_slope_gives_open_upper_bound_and_no_falling_crossing():
    x = np.array([0.0, 100.0, 200.0, 300.0, 400.0])
    noisy_flat = np.array([1.0, 1.3, 0.8, 1.2, 1.1])
    falling = np.array([2.0, 1.9, 1.8, 1.7, 1.61])
    g = np.repeat([0, 1], 5)
    fit = grouped_wls(g, np.tile(x, 2), np.concatenate([noisy_flat, falling]), np.ones(10), 2)
    x_hat, x_low, x_high, bounded = fieller_crossing(fit, 3.0, 0.90)
    assert not bounded[0] and np.isposinf(x_high[0])  # slope not significant: upper bound open
    assert np.isnan(x_hat[1])  # falling line: no crossing ahead
    assert np.isposinf(x_low[1])  # and a significant fall never reaches it


def test_grouped_fit_equals_separate_fits_and_inverse_design_matches_numpy():
    rng = np.random.default_rng(7)
    g = np.repeat(np.arange(3), 20)
    x = rng.uniform(0, 1000, 60)
    y = 0.5 + 0.002 * x + rng.normal(0, 0.1, 60)
    w = rng.uniform(0.5, 2.0, 60)
    fit = grouped_wls(g, x, y, w, 3)
    v_aa, v_ab, v_bb = inverse_design(g, x, w, 3)
    for k in range(3):
        m = g == k
        ref = sm.WLS(y[m], sm.add_constant(x[m]), weights=w[m]).fit()  # statsmodels WLS reference
        assert fit.a[k] == pytest.approx(ref.params[0], rel=1e-9)
        assert fit.b[k] == pytest.approx(ref.params[1], rel=1e-9)
        assert fit.var_b[k] == pytest.approx(ref.cov_params()[1, 1], rel=1e-8)
        inv = np.linalg.inv(sm.add_constant(x[m]).T @ np.diag(w[m]) @ sm.add_constant(x[m]))
        assert [v_aa[k], v_ab[k], v_bb[k]] == pytest.approx([inv[0, 0], inv[0, 1], inv[1, 1]], rel=1e-8)


def test_group_without_spread_or_points_is_nan_not_a_warning():
    g = np.array([0, 0, 0, 2, 2, 2])
    x = np.array([5.0, 5.0, 5.0, 0.0, 1.0, 2.0])
    y = np.array([1.0, 2.0, 3.0, 0.0, 1.0, 2.0])
    fit = grouped_wls(g, x, y, np.ones(6), 3)
    assert np.isnan(fit.b[0]) and np.isnan(fit.b[1])
    assert fit.b[2] == pytest.approx(1.0)


def test_t_quantile_is_scipy_stats_t_ppf_to_the_bit():
    # Reference: scipy.stats.t.ppf (the two-sided multiplier is its quantile at 0.5 + confidence / 2), compared
    # bit for bit over whole and fractional degrees of freedom, and the t table's 2.228 for 95 % and 10 dof
    # (NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.2, upper critical value at 0.025, 10 dof).
    dof = np.concatenate([np.arange(1.0, 2001.0), np.linspace(0.05, 60.0, 1201), [1e6, 1e12, np.inf]])
    for confidence in (0.5, 0.8, 0.9, 0.95, 0.975, 0.99, 0.999):
        expected = stats.t.ppf(0.5 + confidence / 2.0, dof)
        got = t_quantile(confidence, dof)
        assert np.array_equal(got.view(np.int64), expected.view(np.int64)), confidence
    assert t_quantile(0.95, 10.0) == pytest.approx(2.228, abs=5e-4)
    # No degrees of freedom, or none known: no multiplier.
    assert np.isnan(t_quantile(0.9, np.array([0.0, -3.0, np.nan]))).all()
