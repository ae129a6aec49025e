"""The wear laws' fits, their weights and the averaged forecast, checked against statsmodels and scipy.

All data synthetic (numpy random draws with fixed seeds).
"""

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, stats
from statsmodels.robust.norms import HuberT
from statsmodels.tools import eval_measures

from fleet.trend.linear import fieller_crossing, grouped_wls
from fleet.trend.model_average import (
    averaged_slope,
    crossing_band,
    crossing_quantiles,
    plausible_laws,
    value_band,
    value_cdf,
    value_quantile,
)
from fleet.trend.robust import fit_reweighted
from fleet.trend.settings import AnalysisSettings
from fleet.trend.wear_laws import MEMBERS, LawFits, aicc, akaike_weights, fit_wear_laws, joint_score

CONVERGED = AnalysisSettings(irls_iterations=200, irls_tolerance=1e-13)
NAMES = [m.name for m in MEMBERS]


def _one_group(n):
    return np.zeros(n, dtype=int)


def _laws(h, q, sigma, offset=0.0, settings=CONVERGED):
    return fit_wear_laws(_one_group(len(h)), h, q, lambda _f: sigma, np.full(len(h), 1e-6), 1, settings,
                         np.array([offset]))


def test_robust_line_matches_statsmodels_rlm_with_huber_weights():
    rng = np.random.default_rng(11)
    x = np.linspace(0.0, 5000.0, 40)
    y = 3.0 + 1e-3 * x + rng.normal(0.0, 2.0, x.size)  # scatter twice the error model's: the MAD scale leads
    y[[5, 17, 30]] += [15.0, -12.0, 20.0]
    fit, _ = fit_reweighted(_one_group(x.size), x, y, lambda _f: np.ones(x.size), 1, CONVERGED)
    # statsmodels RLM reference: Huber's T norm, t = 1.345, MAD scale about zero, Huber's H1 covariance.
    ref = sm.RLM(y, sm.add_constant(x), M=HuberT(t=1.345)).fit(scale_est="mad", cov="H1", tol=1e-12, maxiter=500)
    assert [fit.a[0], fit.b[0]] == pytest.approx(ref.params, rel=1e-6)
    # Our sandwich is H1 without its small-sample factor k = 1 + p/n var(psi')/mean(psi')^2 (Huber 1981,
    # eq. 7.6.7), so ours times k^2 is statsmodels' H1.
    psi_d = (np.abs(ref.sresid) <= 1.345).astype(float)
    k = 1 + 2 / x.size * psi_d.var() / psi_d.mean() ** 2
    assert fit.var_b[0] * k**2 == pytest.approx(ref.bcov_scaled[1, 1], rel=1e-5)
    assert fit.var_a[0] * k**2 == pytest.approx(ref.bcov_scaled[0, 0], rel=1e-5)


def test_linear_law_on_clean_data_is_statsmodels_wls():
    rng = np.random.default_rng(3)
    h = np.sort(rng.uniform(0.0, 6000.0, 30))
    sigma = rng.uniform(0.2, 0.6, h.size)  # the error model: per-reading meter noise
    q = 5.0 + 1.5e-3 * h + 0.3 * sigma * rng.standard_normal(h.size)  # well inside it: no Huber clipping
    laws = _laws(h, q, sigma)
    j = NAMES.index("linear")
    # statsmodels WLS reference, weights 1 / sigma^2.
    ref = sm.WLS(q, sm.add_constant(h), weights=1 / sigma**2).fit()
    assert [laws.a[0, j], laws.b[0, j]] == pytest.approx(ref.params, rel=1e-9)
    cov = ref.cov_params()
    assert [laws.var_a[0, j], laws.var_b[0, j], laws.cov_ab[0, j]] == pytest.approx(
        [cov[0, 0], cov[1, 1], cov[0, 1]], rel=1e-8
    )


def test_power_law_member_is_scipy_curve_fit_at_its_exponent_and_the_weights_find_the_exponent():
    rng = np.random.default_rng(5)
    offset, h = 800.0, np.linspace(0.0, 5000.0, 36)
    scale = h.max() + offset
    sigma = np.full(h.size, 0.05)
    true_p = 2.0
    q = 4.0 + 6.0 * ((h + offset) / scale) ** true_p + 0.3 * sigma * rng.standard_normal(h.size)
    laws = _laws(h, q, sigma, offset)
    j = NAMES.index("power_p200")

    def model(hh, a, b):
        return a + b * ((hh + offset) / scale) ** true_p

    # scipy.optimize.curve_fit reference at the member's exponent (relative sigma, as our scale is estimated).
    popt, pcov = optimize.curve_fit(model, h, q, sigma=sigma, absolute_sigma=False)
    assert [laws.a[0, j], laws.b[0, j]] == pytest.approx(popt, rel=1e-7)
    # Our member counts its exponent among the fitted parameters: n - 3 degrees of freedom, curve_fit's n - 2.
    assert laws.var_b[0, j] * (h.size - 3) / (h.size - 2) == pytest.approx(pcov[1, 1], rel=1e-6)
    # With the exponent free, curve_fit finds it near 2; our weights put the power law's mass there.
    (_, _, p_hat), _ = optimize.curve_fit(lambda hh, a, b, p: a + b * ((hh + offset) / scale) ** p, h, q,
                                          p0=(4.0, 5.0, 1.5), sigma=sigma)
    powers = np.array([m.power for m in MEMBERS])
    top = int(np.argmax(laws.weight[0]))
    assert MEMBERS[top].law == "power" and abs(np.log(powers[top] / p_hat)) < np.log(2) / 8
    assert laws.law_weights()["power"][0] > 0.9


def test_exponential_law_with_constant_log_variance_is_least_squares_on_the_log():
    rng = np.random.default_rng(9)
    h = np.linspace(0.0, 4000.0, 25)
    frac = 0.02  # case drain meter: constant relative noise, constant variance of ln q
    q = 2.0 * np.exp(2e-4 * h) * (1 + 0.3 * frac * rng.standard_normal(h.size))  # inside it: no clipping
    laws = fit_wear_laws(_one_group(h.size), h, q, lambda f: frac * (q if f is None else f),
                         np.full(h.size, 1e-6), 1, CONVERGED)
    # scipy.optimize.least_squares reference on ln q; ours adds back the log's bias of half its variance.
    ref = optimize.least_squares(lambda p: p[0] + p[1] * h - np.log(q), x0=[0.0, 0.0], xtol=1e-15, ftol=1e-15)
    assert laws.a[0, 0] == pytest.approx(ref.x[0] + 0.5 * frac**2, rel=1e-7)
    assert laws.b[0, 0] == pytest.approx(ref.x[1], rel=1e-7)
    assert laws.law_weights()["exponential"][0] > 0.5


def test_aicc_is_the_least_squares_form_of_burnham_and_anderson():
    # Burnham & Anderson (2002), sec. 2.2 and 2.4: AIC = n ln(RSS / n) + 2K for least squares, K counting the
    # variance too; AICc = AIC + 2K(K + 1) / (n - K - 1). Hand value: n 10, K 3, RSS 5.
    assert aicc(10, 3, 5.0) == pytest.approx(10 * np.log(0.5) + 6 + 24 / 6)
    assert np.isnan(aicc(4, 3, 5.0))  # n - K - 1 = 0: not defined
    # statsmodels reference: its AICc from the Gaussian log-likelihood of an OLS fit differs from the
    # least-squares form by the constant n (ln 2 pi + 1), which no weight sees.
    rng = np.random.default_rng(2)
    x = np.linspace(0, 1, 12)
    y = 1 + 2 * x + rng.normal(0, 0.1, x.size)
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    ref = eval_measures.aicc(ols.llf, x.size, 3)  # k = 2 coefficients + the variance
    assert aicc(x.size, 3, ols.ssr) == pytest.approx(ref - x.size * (np.log(2 * np.pi) + 1), rel=1e-12)


def test_akaike_weights_by_hand():
    # Burnham & Anderson (2002), sec. 2.9: w_i = exp(-delta_i / 2) / sum_j exp(-delta_j / 2).
    w = akaike_weights(np.array([[10.0, 12.0, 14.0], [5.0, np.nan, 5.0], [np.nan, np.nan, np.nan]]))
    e = np.exp([0.0, -1.0, -2.0])
    assert w[0] == pytest.approx(e / e.sum())  # 0.6652, 0.2447, 0.0900
    assert w[1] == pytest.approx([0.5, 0.0, 0.5])
    assert w[2] == pytest.approx([1.0, 0.0, 0.0])  # nothing scored: the exponential law alone


def test_joint_score_adds_trends_and_skips_a_trend_without_scores():
    slip = np.array([[1.0, 2.0, 3.0], [1.0, 2.0, 3.0], [np.nan, np.nan, np.nan]])
    drain = np.array([[10.0, 5.0, np.nan], [np.nan, np.nan, np.nan], [4.0, 6.0, 8.0]])
    joint = joint_score(slip, drain)
    assert joint[0, :2] == pytest.approx([11.0, 7.0]) and np.isnan(joint[0, 2])
    assert joint[1] == pytest.approx([1.0, 2.0, 3.0])
    assert joint[2] == pytest.approx([4.0, 6.0, 8.0])


def _only(laws: LawFits, name: str) -> LawFits:
    w = np.zeros_like(laws.weight)
    w[:, NAMES.index(name)] = 1.0
    return LawFits(laws.a, laws.b, laws.var_a, laws.var_b, laws.cov_ab, laws.dof, w, laws.hours_scale,
                   laws.hours_offset)


def test_one_law_alone_gives_the_fieller_crossing_and_the_statsmodels_band():
    rng = np.random.default_rng(4)
    h = np.linspace(0.0, 4000.0, 15)
    q = 5.0 * np.exp(1e-4 * h + rng.normal(0.0, 0.05, h.size))
    laws = _only(_laws(h, q, 0.05 * q), "exponential")
    line = grouped_wls(_one_group(h.size), h, np.log(q), np.ones(h.size), 1)
    for f in ("a", "b", "var_a", "var_b", "cov_ab", "dof"):  # an exponential line with known parameters
        getattr(laws, f)[0, 0] = getattr(line, f)[0]
    limit = 12.0
    low, mid, high = crossing_quantiles(laws, [limit], [4000.0], (0.05, 0.5, 0.95), 0.90)
    ref_hat, ref_low, ref_high, _ = fieller_crossing(line, np.log(limit), 0.90)  # checked against statsmodels
    assert mid[0] == pytest.approx(ref_hat[0], rel=1e-6)
    assert [low[0], high[0]] == pytest.approx([ref_low[0], ref_high[0]], rel=1e-6)
    # The value band at some hours: statsmodels OLS mean interval on ln q, back on the flow scale.
    grid = np.array([[1000.0, 6000.0]])
    ref = sm.OLS(np.log(q), sm.add_constant(h)).fit().get_prediction(sm.add_constant(grid[0])).summary_frame(
        alpha=0.10)
    assert value_quantile(laws, grid, 0.95, 0.90)[0] == pytest.approx(np.exp(ref["mean_ci_upper"]), rel=1e-9)
    assert value_quantile(laws, grid, 0.5, 0.90)[0] == pytest.approx(np.exp(ref["mean"]), rel=1e-9)


def test_averaged_crossing_solves_the_mixture_found_by_scipy_brentq():
    rng = np.random.default_rng(8)
    h = np.linspace(0.0, 5000.0, 20)
    q = 5.0 + 1.2e-3 * h + 3e-7 * h**2 + rng.normal(0.0, 0.15, h.size)
    laws = _laws(h, q, np.full(h.size, 0.15))
    limit, now = 20.0, 5000.0
    low, mid, high = crossing_quantiles(laws, [limit], [now], (0.05, 0.5, 0.95), 0.90)

    def crossed(x):  # P(averaged trend at x >= limit), written out member by member with scipy.stats
        total = 0.0
        for j, m in enumerate(MEMBERS):
            r = (x + laws.hours_offset[0]) / laws.hours_scale[0]
            if m.law == "power":
                u = r**m.power
            elif m.law == "run_in":  # the run-in member's x, written out
                u = m.share * (1 - np.exp(-r / m.tau)) / (1 - np.exp(-1 / m.tau)) + (1 - m.share) * r
            else:
                u = x
            mean = laws.a[0, j] + laws.b[0, j] * u
            sd = np.sqrt(laws.var_a[0, j] + 2 * u * laws.cov_ab[0, j] + u * u * laws.var_b[0, j])
            level = np.log(limit) if m.log_space else limit
            ratio = stats.norm.ppf(0.95) / stats.t.ppf(0.95, laws.dof[0, j])
            total += laws.weight[0, j] * stats.norm.cdf((mean - level) / sd * ratio)
        return total

    for got, level in ((low, 0.05), (mid, 0.5), (high, 0.95)):
        ref = optimize.brentq(lambda x, lv=level: crossed(x) - lv, now, 1e6)
        assert got[0] == pytest.approx(ref, rel=1e-6)
    assert 1.0 - value_cdf(laws, mid, [limit], 0.90)[0] == pytest.approx(0.5, abs=1e-6)


def test_held_back_weighting_scores_forecasts_of_the_last_readings():
    rng = np.random.default_rng(21)
    h = np.linspace(0.0, 6000.0, 30)
    sigma = np.full(h.size, 0.2)
    q = 5.0 + 2e-3 * h + sigma * rng.standard_normal(h.size)  # steady wear
    held = _laws(h, q, sigma, settings=AnalysisSettings(law_weighting="held_back"))
    in_sample = _laws(h, q, sigma, settings=AnalysisSettings())
    assert held.weight.sum() == pytest.approx(1.0)
    # Same fitted lines, other weights: the linear law forecast the last readings best.
    assert held.a == pytest.approx(in_sample.a, nan_ok=True)
    assert held.law_weights()["linear"][0] > 0.5
    assert not np.allclose(held.weight, in_sample.weight)


def _run_in_readings(rng, tau, share, n=40, offset=0.0, span=5000.0, sigma=0.05):
    h = np.linspace(0.0, span, n)
    u = (h + offset) / (span + offset)
    truth = 4.0 + 3.0 * (share * (1 - np.exp(-u / tau)) / (1 - np.exp(-1 / tau)) + (1 - share) * u)
    return h, truth + 0.3 * sigma * rng.standard_normal(n), np.full(n, sigma)


def test_run_in_member_is_scipy_curve_fit_at_its_tau_and_share():
    rng = np.random.default_rng(12)
    member = next(m for m in MEMBERS if m.law == "run_in" and m.share == 0.5 and abs(m.tau - 0.04 * 10**0.5) < 1e-12)
    h, q, sigma = _run_in_readings(rng, member.tau, member.share)
    laws = _laws(h, q, sigma)
    j = NAMES.index(member.name)

    def model(hh, a, b):  # the member written out from its definition: q = a + b x(u; tau, s)
        u = hh / h.max()
        return a + b * (member.share * (1 - np.exp(-u / member.tau)) / (1 - np.exp(-1 / member.tau))
                        + (1 - member.share) * u)

    # scipy.optimize.curve_fit reference (relative sigma, as our scale is estimated).
    popt, pcov = optimize.curve_fit(model, h, q, sigma=sigma, absolute_sigma=False)
    assert [laws.a[0, j], laws.b[0, j]] == pytest.approx(popt, rel=1e-7)
    # Our member counts tau and the share among its parameters: n - 4 degrees of freedom, curve_fit's n - 2.
    assert laws.var_b[0, j] * (h.size - 4) / (h.size - 2) == pytest.approx(pcov[1, 1], rel=1e-6)
    assert laws.law_weights()["run_in"][0] > 0.9


def test_run_in_grid_finds_the_shape_a_free_fit_finds():
    rng = np.random.default_rng(13)
    h, q, sigma = _run_in_readings(rng, tau=0.1, share=0.5, n=45)
    laws = _laws(h, q, sigma)
    # scipy.optimize.curve_fit reference with tau free and the run-in written as q = a + b u + c (1 - e^(-u/tau))
    # (statsmodels WLS at the fitted tau gives a, b and c linearly; the share is c(1 - e^(-1/tau)) / (b + ...)).
    u = h / h.max()
    (a, b, c, tau), _ = optimize.curve_fit(lambda uu, a, b, c, t: a + b * uu + c * (1 - np.exp(-uu / t)), u, q,
                                           p0=(4.0, 1.0, 1.0, 0.2), sigma=sigma)
    wls = sm.WLS(q, np.column_stack([np.ones_like(u), u, 1 - np.exp(-u / tau)]), weights=1 / sigma**2).fit()
    assert wls.params == pytest.approx([a, b, c], rel=1e-4)
    share = c * (1 - np.exp(-1 / tau)) / (c * (1 - np.exp(-1 / tau)) + b)
    top = MEMBERS[int(np.argmax(laws.weight[0]))]
    assert top.law == "run_in"
    # The heaviest member sits next to the free fit on the grid (steps of 10^(1/6) in tau, 0.1 in share).
    assert abs(np.log(top.tau / tau)) <= np.log(10) / 6 and abs(top.share - share) <= 0.1
    # The averaged growth rate at the latest reading is the free fit's: dq/dh = (b + c e^(-1/tau) / tau) / H.
    rate = (b + c * np.exp(-1 / tau) / tau) / h.max()
    assert averaged_slope(laws, np.array([h.max()]))[0] == pytest.approx(rate, rel=0.05)


def test_run_in_is_not_fitted_where_the_readings_miss_the_early_part():
    rng = np.random.default_rng(14)
    # Readings only from 40 % of the interval on: the run-in (tau 0.04 .. 0.4 of H, needs readings within 3 tau).
    h, q, sigma = _run_in_readings(rng, tau=0.05, share=0.5)
    late = h >= 0.4 * h.max()
    laws = _laws(h[late], q[late], sigma[late], offset=0.0)
    is_run_in = np.array([m.law == "run_in" for m in MEMBERS])
    reach = np.array([m.tau * 3.0 for m in MEMBERS])
    assert not laws.usable[0, is_run_in & (reach < 0.4)].any()
    assert laws.usable[0, is_run_in & (reach > 0.5)].all()


def test_known_law_setting_weighs_only_that_law():
    rng = np.random.default_rng(15)
    h, q, sigma = _run_in_readings(rng, tau=0.1, share=0.5, n=30)
    laws = _laws(h, q, sigma, settings=AnalysisSettings(wear_laws=("linear",)))
    assert laws.law_weights()["linear"][0] == pytest.approx(1.0)
    few = _laws(h[:4], q[:4], sigma[:4], settings=AnalysisSettings(wear_laws=("power",)))  # no law scored
    assert few.law_weights()["power"][0] == pytest.approx(1.0)


def _by_hand(laws: LawFits, weights: dict[str, float]) -> LawFits:
    w = np.zeros_like(laws.weight)
    for name, value in weights.items():
        w[:, NAMES.index(name)] = value
    return LawFits(laws.a, laws.b, laws.var_a, laws.var_b, laws.cov_ab, laws.dof, w, laws.hours_scale,
                   laws.hours_offset)


def test_plausible_laws_are_those_within_an_evidence_ratio_of_eight():
    # Royall (1997), 1/8 likelihood interval; Burnham & Anderson (2002) carry it over to Akaike weights: a law
    # is kept while w_best / w_law <= 8, i.e. its AICc within 2 ln 8 of the best (cited from memory).
    laws = _laws(np.linspace(0.0, 4000.0, 20), 5.0 + 1e-3 * np.linspace(0.0, 4000.0, 20), np.full(20, 0.1))
    for delta, kept in ((2 * np.log(8.0) - 1e-9, True), (2 * np.log(8.0) + 1e-6, False)):
        w = akaike_weights(np.array([[0.0, delta, np.nan, np.nan]]))[0]
        assert w[0] / w[1] == pytest.approx(np.exp(delta / 2))
        fits = _by_hand(laws, {"exponential": w[0], "linear": w[1]})
        plausible = plausible_laws(fits)
        assert plausible["exponential"][0] and plausible["linear"][0] == kept
        assert not plausible["power"][0] and not plausible["run_in"][0]  # no weight: never plausible


def test_band_is_the_union_of_the_plausible_laws_bands_and_the_forecast_the_heaviest_laws_found_by_brentq():
    rng = np.random.default_rng(8)
    h = np.linspace(0.0, 5000.0, 20)
    q = 5.0 + 1.2e-3 * h + 3e-7 * h**2 + rng.normal(0.0, 0.15, h.size)
    # Exponential heaviest, linear plausible (0.3 >= 0.64 / 8), the power member not (0.06 < 0.08).
    weights = {"exponential": 0.64, "linear": 0.30, "power_p283": 0.06}
    laws = _by_hand(_laws(h, q, np.full(h.size, 0.15)), weights)
    limit, now = 30.0, 5000.0

    def crossed(x, name):  # P(that member's line at x >= limit), written out with scipy.stats
        j = NAMES.index(name)
        m = MEMBERS[j]
        u = ((x + laws.hours_offset[0]) / laws.hours_scale[0]) ** m.power if m.law == "power" else x
        mean = laws.a[0, j] + laws.b[0, j] * u
        sd = np.sqrt(laws.var_a[0, j] + 2 * u * laws.cov_ab[0, j] + u * u * laws.var_b[0, j])
        ratio = stats.norm.ppf(0.95) / stats.t.ppf(0.95, laws.dof[0, j])
        return stats.norm.cdf((mean - (np.log(limit) if m.log_space else limit)) / sd * ratio)

    def solve(name, level):
        return optimize.brentq(lambda x: crossed(x, name) - level, now, 1e6)

    low, mid, high = crossing_band(laws, [limit], [now], 0.90)
    assert mid[0] == pytest.approx(solve("exponential", 0.5), rel=1e-6)
    assert low[0] == pytest.approx(min(solve("exponential", 0.05), solve("linear", 0.05)), rel=1e-6)
    assert high[0] == pytest.approx(max(solve("exponential", 0.95), solve("linear", 0.95)), rel=1e-6)
    # The power member, though weighed in, is outside the plausible set: its earlier crossing widens nothing.
    assert solve("power_p283", 0.05) < low[0]
    # The chart's band meets the limit where the bounds say, its centre where the forecast does.
    edges = value_band(laws, np.array([[low[0], mid[0], high[0]]]), 0.90)
    assert edges[2][0, 0] == pytest.approx(limit, rel=1e-6)  # high edge of the flow at the low bound
    assert edges[1][0, 1] == pytest.approx(limit, rel=1e-6)
    assert edges[0][0, 2] == pytest.approx(limit, rel=1e-6)


def _whole_grid_crossings(fits, limit, now_hours, levels, confidence):
    """The crossing search as it was before the grid was walked lazily: the mixture at every grid point of every
    group, then _BISECTIONS halvings of every group's bracket (the reference the lazy search must equal)."""
    from fleet.trend import model_average

    limit = np.asarray(limit, dtype=float)
    now = np.asarray(now_hours, dtype=float)
    ok = np.isfinite(limit) & (limit > 0) & np.isfinite(now) & (now > 0) & (fits.weight.sum(axis=1) > 0)
    span = np.where(ok, now, 1.0)
    grid = span[:, None] * model_average.CROSSING_GRID[None, :]
    limit_g = np.where(ok, limit, 1.0)

    def crossed(hours):
        return 1.0 - value_cdf(fits, hours, limit_g[:, None] if np.ndim(hours) == 2 else limit_g, confidence)

    on_grid = crossed(grid)
    levels = np.asarray(levels, dtype=float)[None, :]
    reached = on_grid[:, :, None] >= levels[:, None, :]
    any_reached = reached.any(axis=1) & ok[:, None]
    first = np.argmax(reached, axis=1)
    rows = np.arange(len(now))[:, None]
    hi = grid[rows, first]
    lo = grid[rows, np.maximum(first - 1, 0)]
    for _ in range(model_average._BISECTIONS):
        mid = 0.5 * (lo + hi)
        up = crossed(mid) >= levels
        lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
    return list(np.where(any_reached, np.where(first == 0, 0.0, hi), np.nan).T)


def test_lazy_crossing_search_finds_the_whole_grid_searchs_crossings_to_the_last_bit():
    # Groups of every kind (common practice, no source: the reference is the search this one replaced):
    # accelerating, steady, exponential and flat wear, a group past its limit at the start, a group without a
    # limit, one without hours; each walks the grid to a different block.
    rng = np.random.default_rng(31)
    groups, hours, flows = [], [], []
    shapes = [lambda h: 5.0 + 1.2e-3 * h + 3e-7 * h**2, lambda h: 5.0 + 2e-3 * h, lambda h: 5.0 * np.exp(2e-4 * h),
              lambda h: 5.0 + 0.0 * h, lambda h: 5.0 + 4e-3 * h, lambda h: 4.0 + 1e-4 * h]
    for g, shape in enumerate(shapes):
        h = np.linspace(0.0, 3000.0 + 700.0 * g, 18 + g)
        groups.append(np.full(h.size, g))
        hours.append(h)
        flows.append(shape(h) + rng.normal(0.0, 0.12, h.size))
    group, h, q = np.concatenate(groups), np.concatenate(hours), np.concatenate(flows)
    laws = fit_wear_laws(group, h, q, lambda _f: np.full(q.size, 0.12), np.full(q.size, 1e-6), len(shapes),
                         CONVERGED, np.zeros(len(shapes)))
    now = np.array([3000.0 + 700.0 * g for g in range(len(shapes))])
    now[5] = np.nan
    limit = np.array([20.0, 15.0, 30.0, 9.0, 3.0, 12.0])
    limit[3] = 9.0
    for levels in ((0.05, 0.5, 0.95), (0.5,), (0.05, 0.95)):
        for fits in (laws, _only(laws, "linear"), _only(laws, "power_p283")):
            got = crossing_quantiles(fits, limit, now, levels, 0.90)
            want = _whole_grid_crossings(fits, limit, now, levels, 0.90)
            for a, b in zip(got, want, strict=True):
                assert np.array_equal(a, b, equal_nan=True), (levels, a, b)
    # The cases are all there: a crossing ahead, one at the start (past the limit), open ones, and no limit.
    low, mid, high = crossing_quantiles(laws, limit, now, (0.05, 0.5, 0.95), 0.90)
    assert np.isfinite(mid[0]) and mid[4] == 0.0 and np.isnan(mid[5])
    assert np.isnan(high).any()
    got = crossing_quantiles(laws, np.where(np.arange(6) == 0, np.nan, limit), now, (0.5,), 0.90)
    assert np.isnan(got[0][0])
