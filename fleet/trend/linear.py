"""Straight-line fits y = a + b x for many groups at once, and inverse prediction of their crossings.

Grouped weighted least squares from np.bincount sums (no loop per group), centred on each group's mean x
for numerical stability. The covariance of (a, b) is scale^2 (X'WX)^-1 with the scale estimated from the
weighted residuals, so the bounds use a t distribution with n - 2 degrees of freedom.
"""

from dataclasses import dataclass

import numpy as np
from scipy import special


@dataclass(frozen=True)
class LineFit:
    """Per-group line parameters, arrays of length n_groups (NaN where the group cannot be fitted)."""

    a: np.ndarray
    b: np.ndarray
    var_a: np.ndarray
    var_b: np.ndarray
    cov_ab: np.ndarray
    scale: np.ndarray  # residual scale: sqrt(sum w r^2 / dof)
    dof: np.ndarray  # effective points - 2
    n_points: np.ndarray
    x_mean: np.ndarray


def _safe_div(num, den):
    """num / den, NaN where den is zero or not finite. Divided by 1 there instead, so no division can warn and no
    error state need be entered (its cost is most of this division's on one pump's few groups)."""
    num = np.asarray(num, dtype=float)
    den = np.asarray(den, dtype=float)
    ok = np.isfinite(den) & (den != 0)
    return np.where(ok, num / np.where(ok, den, 1.0), np.nan)


def _spread(g, x, w, dx, n_groups):
    """Weighted sum of squares of x about its group mean; NaN where the x values do not spread."""
    return _spread_of(g, x, w * x, dx, w * dx, n_groups)


def _spread_of(g, x, wx, dx, wdx, n_groups):
    """_spread from the products w x and w dx a caller has made already (w * dx * dx is (w * dx) * dx: the same
    products, so the same sums)."""
    sxx = np.bincount(g, wdx * dx, minlength=n_groups)
    return np.where(sxx > 1e-12 * np.maximum(np.bincount(g, wx * x, minlength=n_groups), 1e-300), sxx, np.nan)


def inverse_design(group: np.ndarray, x: np.ndarray, w: np.ndarray, n_groups: int):
    """Per group (X'WX)^-1 of the line a + b x as (v_aa, v_ab, v_bb); NaN where x does not spread."""
    use = np.isfinite(x) & np.isfinite(w) & (w > 0)
    g, x, w = group[use], x[use], w[use]
    s0 = np.bincount(g, w, minlength=n_groups)
    wx = w * x
    x_mean = _safe_div(np.bincount(g, wx, minlength=n_groups), s0)
    dx = x - x_mean[g]
    inv_sxx = _safe_div(1.0, _spread_of(g, x, wx, dx, w * dx, n_groups))
    return _safe_div(1.0, s0) + x_mean**2 * inv_sxx, -x_mean * inv_sxx, inv_sxx


def grouped_line(group: np.ndarray, x: np.ndarray, y: np.ndarray, w: np.ndarray, n_groups: int):
    """Only the weighted least-squares line (a, b) per group, as grouped_wls but without its error terms
    (the reweighting passes of a robust fit need nothing else). Points with w <= 0 or non-finite values
    are ignored; NaN where a group's x do not spread."""
    use = np.isfinite(x) & np.isfinite(y) & np.isfinite(w) & (w > 0)
    if not use.all():
        group, x, y, w = group[use], x[use], y[use], w[use]
    s0 = np.bincount(group, w, minlength=n_groups)
    wx = w * x  # each product made once and shared by the sums that hold it, multiplied in their order
    x_mean = _safe_div(np.bincount(group, wx, minlength=n_groups), s0)
    y_mean = _safe_div(np.bincount(group, w * y, minlength=n_groups), s0)
    dx = x - x_mean[group]
    wdx = w * dx
    sxx = _spread_of(group, x, wx, dx, wdx, n_groups)
    b = _safe_div(np.bincount(group, wdx * (y - y_mean[group]), minlength=n_groups), sxx)
    return y_mean - b * x_mean, b, x_mean


def grouped_wls(
    group: np.ndarray, x: np.ndarray, y: np.ndarray, w: np.ndarray, n_groups: int, dof_points=None
) -> LineFit:
    """Weighted least-squares line per group.

    group: int codes 0..n_groups-1; points with w <= 0 or non-finite x, y, w are ignored. dof_points
    (per group) overrides the point count used for the degrees of freedom, e.g. the sum of robustness
    weights in an M-estimate.
    """
    use = np.isfinite(x) & np.isfinite(y) & np.isfinite(w) & (w > 0)
    g, x, y, w = group[use], x[use], y[use], w[use]
    count = np.bincount(g, minlength=n_groups).astype(float)
    s0 = np.bincount(g, w, minlength=n_groups)
    x_mean = _safe_div(np.bincount(g, w * x, minlength=n_groups), s0)
    y_mean = _safe_div(np.bincount(g, w * y, minlength=n_groups), s0)
    dx = x - x_mean[g]
    dy = y - y_mean[g]
    sxx = _spread(g, x, w, dx, n_groups)
    sxy = np.bincount(g, w * dx * dy, minlength=n_groups)
    b = _safe_div(sxy, sxx)
    a = y_mean - b * x_mean
    resid = y - (a[g] + b[g] * x)
    rss = np.bincount(g, w * resid * resid, minlength=n_groups)
    dof = (count if dof_points is None else np.asarray(dof_points, dtype=float)) - 2.0
    scale2 = _safe_div(rss, np.where(dof > 0, dof, np.nan))
    var_b = _safe_div(scale2, sxx)
    var_a = scale2 * _safe_div(1.0, s0) + x_mean**2 * var_b
    cov_ab = -x_mean * var_b
    return LineFit(a, b, var_a, var_b, cov_ab, np.sqrt(scale2), dof, count, x_mean)


def t_quantile(confidence: float, dof) -> np.ndarray:
    """Two-sided t multiplier for a confidence level (NaN where dof <= 0): Student's t quantile at
    0.5 + confidence / 2 by scipy.special.stdtrit, the function scipy.stats.t.ppf evaluates after its argument
    checks (to the same bits, tests/test_trend_linear.py), without loading scipy.stats and its checks' cost."""
    dof = np.asarray(dof, dtype=float)
    ok = dof > 0
    return np.where(ok, special.stdtrit(np.where(ok, dof, 1.0), 0.5 + confidence / 2.0), np.nan)


def line_variance(fit: LineFit, x, index=None) -> np.ndarray:
    """Variance of the fitted mean a + b x (broadcasts x against the groups, or picks groups by index)."""
    sel = slice(None) if index is None else index
    x = np.asarray(x, dtype=float)
    return fit.var_a[sel] + 2.0 * x * fit.cov_ab[sel] + x * x * fit.var_b[sel]


def fieller_crossing(fit: LineFit, level, confidence: float):
    """Where each line a + b x reaches `level`, with a Fieller (inverse prediction) interval.

    Returns (x_hat, x_low, x_high, bounded): x_hat = (level - a) / b (NaN when b <= 0: no crossing ahead);
    [x_low, x_high] the set of x whose confidence interval of the mean line contains `level`.
    When the slope is not significant at the level (b^2 <= t^2 var_b) that set is not a finite interval:
    x_high is +inf (unbounded) and x_low is the lower edge of the set's upper part, or -inf when the set
    is the whole line.
    """
    level = np.asarray(level, dtype=float)
    a, b = fit.a, fit.b
    t = t_quantile(confidence, fit.dof)
    t2 = t * t
    d = a - level
    # (d + b x)^2 <= t^2 (var_a + 2 x cov + x^2 var_b)  <=>  A x^2 + 2 B x + C <= 0
    qa = b * b - t2 * fit.var_b
    qb = d * b - t2 * fit.cov_ab
    qc = d * d - t2 * fit.var_a
    disc = qb * qb - qa * qc
    root = np.sqrt(np.where(disc > 0, disc, 0.0))
    bounded = qa > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        safe_qa = np.where(qa != 0, qa, np.nan)
        r1 = (-qb - root) / safe_qa
        r2 = (-qb + root) / safe_qa
    x_hat = np.where(b > 0, _safe_div(level - a, b), np.nan)
    r_small = np.minimum(r1, r2)
    r_big = np.maximum(r1, r2)
    # Not significant (qa <= 0): the set is (-inf, r_small] U [r_big, inf) or the whole line. Its lower
    # edge ahead is r_big when the estimate (or, with no estimate, the future) lies in the upper part.
    ahead = (disc > 0) & ~(x_hat < r_big)
    low_unbounded = np.where(ahead, r_big, -np.inf)
    # Significant decline (qa > 0, b < 0): the level was crossed in the past, never ahead.
    x_low = np.where(bounded, np.where(b > 0, r_small, np.inf), low_unbounded)
    x_high = np.where(bounded & (b > 0), r_big, np.inf)
    invalid = ~np.isfinite(a) | ~np.isfinite(b) | ~np.isfinite(t)
    x_low = np.where(invalid, np.nan, x_low)
    x_high = np.where(invalid, np.nan, x_high)
    return x_hat, x_low, x_high, bounded & ~invalid
