"""The slip's forecast on the case drain's shape (LawFits.centred_on), checked against statsmodels and scipy.

All data synthetic (numpy random draws with fixed seeds): a case drain that is a fixed share of the slip, read
with 2 % noise, and a slip read with ten times the relative noise.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize

from fleet.trend.model_average import crossing_band, value_band
from fleet.trend.settings import AnalysisSettings
from fleet.trend.wear_laws import MEMBERS, LawFits, _through_origin, fit_wear_laws, joint_score, member_columns

SETTINGS = AnalysisSettings(irls_iterations=200, irls_tolerance=1e-13)
EXP = 0  # MEMBERS[0] is the exponential law


def _pair(drain_drift=0.0, seed=21, n=30):
    """Slip and case drain of one interval growing exponentially; the drain's share of the slip grows by
    drain_drift per 1000 h (0: a fixed share). Returns hours, slip, its sigma, and the two weighed fits."""
    rng = np.random.default_rng(seed)
    h = np.linspace(0.0, 5000.0, n)
    true_slip = 4.0 * np.exp(2e-4 * h)
    slip = true_slip + rng.normal(0.0, 0.4, n)  # the slip: a difference of two large flows, noisy
    drain = 0.3 * true_slip * (1.0 + drain_drift * h / 1000.0) * (1.0 + rng.normal(0.0, 0.02, n))
    sigma = np.full(n, 0.4)
    group = np.zeros(n, dtype=int)
    slip_laws = fit_wear_laws(group, h, slip, lambda _f: sigma, np.full(n, 1e-6), 1, SETTINGS, np.zeros(1))
    drain_laws = fit_wear_laws(group, h, drain, lambda f: 0.02 * (drain if f is None else f), np.full(n, 1e-6), 1,
                               SETTINGS, np.zeros(1))
    joint = joint_score(slip_laws.law_score, drain_laws.law_score)
    members = joint_score(slip_laws.member_score, drain_laws.member_score)
    slip_laws.weigh(joint, members)
    drain_laws.weigh(joint, members)
    return h, slip, sigma, slip_laws, drain_laws


def test_level_through_the_origin_is_statsmodels_wls_without_a_constant():
    rng = np.random.default_rng(5)
    x = np.linspace(1.0, 3.0, 25)
    sigma = rng.uniform(0.5, 1.0, x.size)
    y = 2.5 * x + rng.normal(0.0, 0.1, x.size)  # scatter well inside the error model: no reading down-weighted
    k, robust = _through_origin(np.zeros(x.size, dtype=int), x, y, 1.0 / sigma**2, 1, 1.345)
    # statsmodels WLS reference: y on x alone (no constant), weights 1 / sigma^2.
    ref = sm.WLS(y, x[:, None], weights=1.0 / sigma**2).fit()
    assert k[0] == pytest.approx(ref.params[0], rel=1e-12)
    assert (robust == 1.0).all()


def test_a_gross_outlier_moves_the_level_little():
    x = np.linspace(1.0, 3.0, 25)
    y = 2.5 * x
    y[7] += 40.0  # a misread meter, a hundred error-model sigmas off
    k, robust = _through_origin(np.zeros(x.size, dtype=int), x, y, np.full(x.size, 1.0 / 0.1**2), 1, 1.345)
    plain = sm.WLS(y, x[:, None]).fit().params[0]  # statsmodels WLS: what an unweighted level would be
    assert abs(k[0] - 2.5) < 0.05 * abs(plain - 2.5) and robust[7] < 0.01


def test_forecast_follows_the_drain_shape_and_the_band_stays_the_slips_own():
    h, slip, sigma, slip_laws, drain_laws = _pair()
    own_low, own_mid, own_high = crossing_band(slip_laws, np.array([12.0]), np.array([5000.0]), 0.9)
    slip_laws.centred_on(drain_laws, np.zeros(h.size, dtype=int), h, slip, sigma, SETTINGS)
    # The exponential member's centre: the drain's growth rate, the slip's level.
    assert slip_laws.centre_b[0, EXP] == pytest.approx(drain_laws.b[0, EXP], rel=1e-12)
    drain_line = np.exp(drain_laws.a[0, EXP] + drain_laws.b[0, EXP] * h)
    level = sm.WLS(slip, drain_line[:, None], weights=1.0 / sigma**2).fit().params[0]  # statsmodels WLS
    assert np.exp(slip_laws.centre_a[0, EXP] - drain_laws.a[0, EXP]) == pytest.approx(level, rel=1e-2)
    low, mid, high = crossing_band(slip_laws, np.array([12.0]), np.array([5000.0]), 0.9)
    laws = slip_laws.law_weights()
    assert max(laws, key=lambda law: laws[law][0]) == "exponential"
    centred = slip_laws.centred()
    of_exp = [m.law == "exponential" for m in MEMBERS]
    assert sum(of_exp) == 1
    # scipy brentq reference: where the centred exponential line reaches the limit.
    expected = optimize.brentq(lambda x: centred.a[0, EXP] + centred.b[0, EXP] * x - np.log(12.0), 0.0, 1e6)
    assert mid[0] == pytest.approx(expected, rel=1e-6)
    # True crossing of the invented pump: 4 exp(2e-4 h) = 12 (ln 3 / 2e-4 h); the drain's shape lands nearer.
    truth = np.log(3.0) / 2e-4
    assert abs(mid[0] - truth) < abs(own_mid[0] - truth)
    assert low[0] == pytest.approx(min(own_low[0], mid[0])) and high[0] == pytest.approx(max(own_high[0], mid[0]))
    # The chart's centre line meets the limit at the forecast; its edges are the slip's own band.
    edge_low, centre, edge_high = value_band(slip_laws, np.array([[mid[0]]]), 0.9)
    assert centre[0, 0] == pytest.approx(12.0, rel=1e-6)
    assert edge_low[0, 0] <= centre[0, 0] <= edge_high[0, 0]


def test_a_drifting_drain_share_is_refuted_and_the_slip_keeps_its_own_line():
    h, slip, sigma, slip_laws, drain_laws = _pair(drain_drift=0.0, n=60)  # control: a fixed share is taken
    slip_laws.centred_on(drain_laws, np.zeros(h.size, dtype=int), h, slip, sigma, SETTINGS)
    assert slip_laws.centre_b[0, EXP] == drain_laws.b[0, EXP] != slip_laws.b[0, EXP]
    h, slip, sigma, slip_laws, drain_laws = _pair(drain_drift=0.4, n=60)
    slip_laws.centred_on(drain_laws, np.zeros(h.size, dtype=int), h, slip, sigma, SETTINGS)
    assert slip_laws.centre_a[0, EXP] == slip_laws.a[0, EXP]
    assert slip_laws.centre_b[0, EXP] == slip_laws.b[0, EXP]


def _columns(laws: LawFits, prefix: str) -> dict:
    """The trend's columns of FleetAnalysis.fits, as degradation.FitColumns reads them from the laws' arrays."""
    return {name: getattr(laws, field) if j is None else getattr(laws, field)[:, j]
            for name, (_, field, j, _) in member_columns(prefix, laws.line_fields()).items()}


def test_centre_lines_survive_the_columns_they_are_stored_in():
    h, slip, sigma, slip_laws, drain_laws = _pair()
    slip_laws.centred_on(drain_laws, np.zeros(h.size, dtype=int), h, slip, sigma, SETTINGS)
    columns = _columns(slip_laws, "slip")
    back = LawFits.from_columns(pd.DataFrame(columns), "slip")
    one = LawFits.from_columns({k: v[0] for k, v in columns.items()}, "slip")
    for fits in (back, one):
        assert np.array_equal(fits.centre_a, slip_laws.centre_a, equal_nan=True)
        assert np.array_equal(fits.centre_b, slip_laws.centre_b, equal_nan=True)
    # A trend never centred keeps no centre columns, and reads back without them.
    assert not any(name.endswith("_centre_a") for name in _columns(drain_laws, "drain"))
    assert LawFits.from_columns(pd.DataFrame(_columns(drain_laws, "drain")), "drain").centre_a is None
