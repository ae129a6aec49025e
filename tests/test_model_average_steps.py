"""The searches of fleet.trend.model_average (crossings and value quantiles) take one step after another, and for
one pump each step's fixed cost is most of it: a step now sets numpy's error state once, skips a law no weighed
pair is of and the logarithm where no pair is of ln q, and maps a NaN probability to 0.5 with np.where rather
than np.nan_to_num; the halvings take what stays fixed (a crossing's limit, a value quantile's hours) once per search,
and one search finds every law's crossings of both limits. The per-step code before is kept here as the
reference; every search must give its figures to the last bit (common practice, no source: a reference
implementation kept beside the faster one). The readings are invented."""

import dataclasses

import numpy as np
import pytest
from scipy import special

from fleet.trend import model_average
from fleet.trend.settings import AnalysisSettings
from fleet.trend.wear_laws import fit_wear_laws, run_in_x

CONVERGED = AnalysisSettings(irls_iterations=200, irls_tolerance=1e-13)


def _reference_moments(pairs, hours):
    col = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    x = hours.copy()
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        u = np.maximum((hours + pairs["offset"][col]) / pairs["scale"][col], 0.0)
        power, run_in = pairs["kind"] == 1, pairs["kind"] == 2
        x[power] = u[power] ** pairs["power"][power][col]
        x[run_in] = run_in_x(u[run_in], pairs["tau"][run_in][col], pairs["share"][run_in][col])
        mean = pairs["a"][col] + pairs["b"][col] * x
        var = pairs["var_a"][col] + 2.0 * x * pairs["cov_ab"][col] + x * x * pairs["var_b"][col]
        sd = np.sqrt(np.maximum(var, 0.0))
    return mean, sd, np.broadcast_to(pairs["log"][col], hours.shape)


def _reference_cdf_at(pairs, moments, value):
    mean, sd, log = moments
    col = (slice(None), None) if mean.ndim == 2 else (slice(None),)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        level = np.where(log, np.log(np.where(value > 0, value, np.nan)), value)
        t = (level - mean) / sd
    t = np.where(sd > 0, t, np.where(level >= mean, np.inf, -np.inf))
    t = np.where(log & ~(value > 0), -np.inf, t)
    return np.nan_to_num(special.ndtr(t * pairs["ratio"][col]), nan=0.5)


def _reference_mixture(pairs, hours, value, moments=None):
    total = np.zeros(hours.shape)
    rows = pairs["rows"]
    if rows.size:
        col = (slice(None), None) if hours.ndim == 2 else (slice(None),)
        moments = _reference_moments(pairs, hours[rows]) if moments is None else moments
        p = _reference_cdf_at(pairs, moments, value[rows])
        total[rows[pairs["starts"]]] = np.add.reduceat(pairs["weight"][col] * p, pairs["starts"], axis=0)
    return total


def _laws():
    """Groups of every wear shape (accelerating, steady, exponential, run-in, flat), each its own group, and the
    same readings as one group each (a pump's few pairs), with limits and current hours."""
    rng = np.random.default_rng(17)
    shapes = [lambda h: 5.0 + 1.2e-3 * h + 3e-7 * h**2, lambda h: 5.0 + 2e-3 * h, lambda h: 5.0 * np.exp(2e-4 * h),
              lambda h: 5.0 + 2.0 * (1.0 - np.exp(-h / 400.0)) + 5e-4 * h, lambda h: 5.0 + 0.0 * h,
              lambda h: 4.0 + 4e-3 * h]
    groups, hours, flows = [], [], []
    for g, shape in enumerate(shapes):
        h = np.linspace(0.0, 3000.0 + 600.0 * g, 20 + 2 * g)
        groups.append(np.full(h.size, g))
        hours.append(h)
        flows.append(shape(h) + rng.normal(0.0, 0.1, h.size))
    group, h, q = np.concatenate(groups), np.concatenate(hours), np.concatenate(flows)
    laws = fit_wear_laws(group, h, q, lambda _f: np.full(q.size, 0.1), np.full(q.size, 1e-6), len(shapes),
                         CONVERGED, np.zeros(len(shapes)))
    now = np.array([3000.0 + 600.0 * g for g in range(len(shapes))])
    limit = np.array([20.0, 15.0, 30.0, 14.0, 9.0, 3.0])  # the last is passed at the start
    return laws, limit, now


def _searches(laws, limit, now):
    hours = now[:, None] * np.array([[0.0, 0.5, 1.0, 2.0, 10.0]])
    return {
        "crossing_band": model_average.crossing_band(laws, limit, now, 0.90),
        "crossing_quantiles": model_average.crossing_quantiles(laws, limit, now, (0.05, 0.5, 0.95), 0.90),
        "crossing_median": model_average.crossing_quantiles(laws, limit, now, (0.5,), 0.90),
        "value_band": model_average.value_band(laws, hours, 0.90),
        "value_quantile": model_average.value_quantile(laws, now, 0.5, 0.90),
        "heaviest_law_median": model_average.heaviest_law_median(laws, hours, 0.90),
        "value_cdf": model_average.value_cdf(laws, hours, limit[:, None], 0.90),
    }


def test_every_search_gives_the_reference_steps_figures_to_the_last_bit(monkeypatch):
    laws, limit, now = _laws()
    pairs = model_average._weighed_pairs(laws, 0.90)
    # The cases are all there: pairs of the power and run-in families and of ln q, and pairs of plain lines.
    assert {0, 1, 2} <= set(pairs["kind"].tolist()) and pairs["log"].any() and not pairs["log"].all()
    cases = [(laws, limit, now)]
    for g in range(len(now)):  # each group alone (the others unfitted): one pump's few pairs
        alone = dataclasses.replace(laws, weight=np.where((np.arange(len(now)) == g)[:, None], laws.weight, 0.0),
                                    _t_ratio={})
        cases.append((alone, limit, now))
    for law in ("linear", "exponential", "power", "run_in"):  # one law alone: some steps without log or run-in pairs
        cases.append((model_average.law_alone(laws, law), limit, now))
    mine = [_searches(*case) for case in cases]
    monkeypatch.setattr(model_average, "_mixture_cdf", _reference_mixture)
    monkeypatch.setattr(model_average, "_pairs_moments", _reference_moments)
    # The crossing's halvings take the step with what the value fixes taken once: the reference step instead.
    monkeypatch.setattr(model_average, "_fixed_value_step",
                        lambda pairs, value: lambda hours: _reference_mixture(pairs, hours, value))
    # A value quantile's halvings take the step with the pairs' moments at its hours once: the reference step.
    monkeypatch.setattr(model_average, "_fixed_hours_step", lambda pairs, moments, shape: lambda value:
                        _reference_mixture(pairs, np.zeros(shape), value, moments))
    reference = [_searches(*case) for case in cases]
    finite = 0
    for got, want in zip(mine, reference, strict=True):
        for name in want:
            for a, b in zip(np.atleast_1d(got[name]) if not isinstance(got[name], tuple | list) else got[name],
                            np.atleast_1d(want[name]) if not isinstance(want[name], tuple | list) else want[name],
                            strict=True):
                assert np.array_equal(a, b, equal_nan=True), (name, a, b)
                finite += int(np.isfinite(a).sum())
    assert finite > 100


def test_a_step_without_log_or_run_in_pairs_skips_them_and_agrees(monkeypatch):
    laws, limit, now = _laws()
    linear = model_average.law_alone(laws, "linear")
    pairs = model_average._weighed_pairs(linear, 0.90)
    assert not pairs["log"].any() and not (pairs["kind"] > 0).any()
    hours = np.broadcast_to(now[:, None], (len(now), 3))
    value = limit[:, None] * np.array([[0.5, 1.0, 2.0]])
    got = model_average._mixture_cdf(pairs, hours, value)
    want = _reference_mixture(pairs, hours, value)
    assert np.array_equal(got, want, equal_nan=True)
    assert got[0] == pytest.approx(want[0], abs=0)  # and a probability, not NaN
    assert ((got >= 0) & (got <= 1)).all()


def _reference_crossing_band(fits, limit, now_hours, confidence):
    """crossing_band as it was: one crossing search per plausible law (and one more for the forecast's centred
    law), each through crossing_quantiles (which tests/test_trend_wear_laws.py holds to the whole-grid search)."""
    alpha = 1.0 - confidence
    centred = fits.centred()
    heaviest = model_average.heaviest_law(centred)
    n = len(fits)
    median, low, high = np.full(n, np.nan), np.full(n, np.nan), np.full(n, -np.inf)
    open_high = np.zeros(n, dtype=bool)
    for k, (law, rows) in enumerate(model_average.plausible_laws(fits, heaviest).items()):
        if not rows.any():
            continue
        top = rows & (heaviest == k)
        alone = model_average.law_alone(fits, law, rows)
        if centred is fits:
            lo, mid, hi = model_average.crossing_quantiles(alone, limit, now_hours, (alpha / 2, 0.5, 1 - alpha / 2),
                                                           confidence)
        else:
            lo, hi = model_average.crossing_quantiles(alone, limit, now_hours, (alpha / 2, 1 - alpha / 2), confidence)
            mid = np.full(n, np.nan)
            if top.any():
                (mid,) = model_average.crossing_quantiles(model_average.law_alone(centred, law, top), limit,
                                                          now_hours, (0.5,), confidence)
        median = np.where(top, mid, median)
        low = np.where(rows, np.fmin(low, lo), low)
        open_high |= rows & np.isnan(hi)
        high = np.where(rows, np.fmax(high, hi), high)
    low = np.fmin(low, median)
    high = np.where(np.isfinite(high), np.fmax(high, median), high)
    reached = np.isfinite(median) | np.isfinite(low)
    return low, median, np.where(open_high | ~np.isfinite(high) | ~reached, np.nan, high)


def _centred(laws, shift):
    """The same fits with invented lines for the forecast to follow (as LawFits.centred_on sets them)."""
    return dataclasses.replace(laws, centre_a=laws.a + shift, centre_b=laws.b * (1.0 + shift), _t_ratio={})


def test_one_search_for_every_law_and_limit_gives_each_laws_own_searches_figures():
    """crossing_bands finds every plausible law's crossings of several cases (the slip's and the case drain's
    limits) in one search; each figure must be the one-search-per-law code's to the last bit (common practice, no
    source: the code before kept here as the reference)."""
    laws, limit, now = _laws()
    cases = [(laws, limit, now), (_centred(laws, 0.02), limit, now), (_centred(laws, -0.05), 0.8 * limit, now)]
    for g in range(len(now)):  # one pump's few pairs: each group alone, beside a fleet case
        alone = dataclasses.replace(laws, weight=np.where((np.arange(len(now)) == g)[:, None], laws.weight, 0.0),
                                    _t_ratio={})
        cases.append((alone, limit, now))
        cases.append((_centred(alone, 0.03), limit, now))
    cases.append((laws, np.where(np.arange(len(now)) % 2 == 0, limit, np.nan), now))  # groups without a limit
    stacked = model_average.crossing_bands(cases, 0.90)
    finite = 0
    for case, got in zip(cases, stacked, strict=True):
        want = _reference_crossing_band(*case, 0.90)
        alone = model_average.crossing_band(*case, 0.90)
        for a, b, c in zip(got, want, alone, strict=True):
            assert np.array_equal(a, b, equal_nan=True), (a, b)
            assert np.array_equal(c, b, equal_nan=True), (c, b)
            finite += int(np.isfinite(a).sum())
    assert finite > 60
    # The centred cases take the forecast from their own lines: it differs from the trend's median crossing.
    assert not np.array_equal(stacked[0][1], stacked[1][1], equal_nan=True)


def _reference_heaviest_law_median(fits, hours, confidence):
    """heaviest_law_median as it was: one value search per law, over the groups that law is heaviest in."""
    hours = np.asarray(hours, dtype=float)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    centred = fits.centred()
    heaviest = model_average.heaviest_law(centred)
    median = np.full(hours.shape, np.nan)
    for k, law in enumerate(model_average.LAWS):
        rows = (heaviest == k) & (fits.weight.sum(axis=1) > 0)
        if rows.any():
            mid = model_average.value_quantile(model_average.law_alone(centred, law, rows), hours, 0.5, confidence)
            median = np.where(rows[expand], mid, median)
    return median


def test_one_value_search_for_every_groups_heaviest_law_gives_each_laws_own_searches_figures():
    """heaviest_law_median searches every group's heaviest law at once; each figure must be the one-search-per-law
    code's to the last bit (common practice, no source: the code before kept here as the reference)."""
    laws, limit, now = _laws()
    heaviest = model_average.heaviest_law(laws)
    assert len(set(heaviest.tolist())) >= 3  # groups whose heaviest laws differ share the one search
    grid = now[:, None] * np.array([[0.0, 0.5, 1.0, 2.0, 10.0]])
    cases = [laws, _centred(laws, 0.02), _centred(laws, -0.05),
             dataclasses.replace(laws, weight=np.where((np.arange(len(now)) % 2 == 0)[:, None], laws.weight, 0.0),
                                 _t_ratio={}),
             dataclasses.replace(laws, weight=np.zeros_like(laws.weight), _t_ratio={})]
    finite = 0
    for fits in cases:
        for hours in (now, grid):
            got = model_average.heaviest_law_median(fits, hours, 0.90)
            want = _reference_heaviest_law_median(fits, hours, 0.90)
            assert got.shape == want.shape and np.array_equal(got, want, equal_nan=True), (got, want)
            finite += int(np.isfinite(got).sum())
    assert finite > 50
