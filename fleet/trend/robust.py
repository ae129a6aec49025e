"""Robust weighted straight-line fits y = a + b x for many groups at once (IRLS with Huber weights).

Every wear law is a straight line in its own coordinates (log slip against hours, slip against hours, slip
against a power of hours), so one fitter serves them all: grouped sums, a few reweighting passes, never one
solver call per pump.
"""

import numpy as np

from fleet.trend.grouped import group_median
from fleet.trend.linear import LineFit, grouped_line, inverse_design
from fleet.trend.settings import AnalysisSettings


def robust_scale(group: np.ndarray, z: np.ndarray, n_groups: int) -> np.ndarray:
    """Per group 1.4826 x median |z| (MAD about the line), never below 1: the error model's own scatter."""
    mad = group_median(group, np.abs(z), n_groups)
    # a group without values has no median: 1 (as np.nan_to_num(mad, nan=1.0), whose checks cost more here; an
    # infinite median stays infinite either way once scaled)
    return np.maximum(1.4826 * np.where(np.isnan(mad), 1.0, mad), 1.0)


def huber_weights(u: np.ndarray, k: float) -> np.ndarray:
    """Huber's weights of scaled residuals u: k / u beyond k, 1 within (and for a missing u). Divided only where
    u is beyond k, so nothing can warn and no error state need be entered (on one pump's few hundred readings
    that costs more than the division)."""
    beyond = u > k
    return np.where(beyond, k / np.where(beyond, u, 1.0), 1.0)


def fit_reweighted(
    group: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    variance_of_fit,
    n_groups: int,
    settings: AnalysisSettings,
    log_scale: bool = False,
    n_params: int = 2,
    robust_w: np.ndarray | None = None,
) -> tuple[LineFit, np.ndarray]:
    """Robust weighted line fit of y on x per group (IRLS with Huber weights); returns the fit and the Huber
    weights of its last pass.

    variance_of_fit(fitted_y or None) gives each point's variance under the error model; it is re-evaluated
    at the fitted line so that a single noisy point does not set its own weight. Huber weights downweight
    outliers; the robust scale never drops below 1, the scatter the error model itself explains, so ordinary
    noise is never treated as an outlier. The covariance is Huber's sandwich, scale^2 = sum psi^2 / (n - p)
    / mean(psi')^2 times (X'WX)^-1 of the error-model weights, which stays honest when ordinary tails get
    clipped (a plain weighted residual sum would shrink). n_params counts every fitted parameter of the law
    (a power law's exponent too), for the degrees of freedom.

    robust_w: Huber weights found elsewhere (by other laws on the same readings); then there is a single
    weighted pass with them instead of the reweighting passes.

    log_scale: y is the log of a noisy flow, biased low by about half its variance (second-order Taylor
    term); that is put back, or low-slip (early, cold, low-pressure) readings would tilt the slope.
    """
    k = settings.huber_k
    variance = variance_of_fit(None)
    model_w = 1.0 / variance
    bias = 0.5 if log_scale else 0.0
    y_used = y + bias * variance
    fixed = robust_w is not None
    a, b, x_mean = grouped_line(group, x, y_used, model_w * (robust_w if fixed else 1.0), n_groups)
    if not fixed:
        previous = None
        done = np.zeros(n_groups, dtype=bool)
        # Each pass works on the readings of the groups still moving (`rows`, None for every reading): a settled
        # group's line, error model and weights no longer change, so its readings are left as they are; only the
        # error model is evaluated over every reading (variance_of_fit takes whole arrays), at each reading's
        # latest fitted value (`at`), and read at the moving ones.
        rows = None
        at = None
        for _ in range(settings.irls_iterations):
            g_r, x_r, y_r = (group, x, y) if rows is None else (group[rows], x[rows], y[rows])
            fitted = a[g_r] + b[g_r] * x_r
            ok = np.isfinite(fitted)
            if previous is not None:
                # A group whose fitted values moved less than the tolerance keeps its line from now on; each
                # group's result depends on its own readings only, whichever pumps are analysed with it.
                before = previous if rows is None else previous[rows]
                moved = ok & (np.abs(fitted - before) > settings.irls_tolerance * (1.0 + np.abs(fitted)))
                done |= np.bincount(g_r, moved, minlength=n_groups) == 0
                if done.all():
                    break
            fitted_or_y = np.where(ok, fitted, y_r)
            if rows is None:
                previous, at = fitted, fitted_or_y
                variance = np.where(ok, variance_of_fit(at), variance)
                var_r = variance
            else:
                previous[rows] = fitted
                at[rows] = fitted_or_y
                var_r = np.where(ok, variance_of_fit(at)[rows], variance[rows])
                variance[rows] = var_r
            model_w_r = 1.0 / var_r
            y_used_r = y_r + bias * var_r
            z = (y_used_r - np.where(ok, fitted, y_used_r)) * np.sqrt(model_w_r)
            # Only the groups still moving are refitted: each group's scale and line come from its own readings,
            # so leaving the settled ones out changes no figure and spares most of the later passes.
            if done.any():
                moving = np.flatnonzero(~done[g_r])
                rows = moving if rows is None else rows[moving]
                g_r, x_r, y_used_r, model_w_r, z = (g_r[moving], x_r[moving], y_used_r[moving], model_w_r[moving],
                                                    z[moving])
            u = np.abs(z) / robust_scale(g_r, z, n_groups)[g_r]
            pass_w = huber_weights(u, k)
            a_new, b_new, x_mean_new = grouped_line(g_r, x_r, y_used_r, model_w_r * pass_w, n_groups)
            a, b, x_mean = np.where(done, a, a_new), np.where(done, b, b_new), np.where(done, x_mean, x_mean_new)
        # The error model and the Huber weights at the final line, so that they depend on it alone (not on
        # whether the passes stopped because this group or the last one had converged).
        fitted = a[group] + b[group] * x
        ok = np.isfinite(fitted)
        variance = np.where(ok, variance_of_fit(np.where(ok, fitted, y)), variance)
        model_w = 1.0 / variance
        y_used = y + bias * variance
        z = (y_used - np.where(ok, fitted, y_used)) * np.sqrt(model_w)
        scale = robust_scale(group, z, n_groups)
        u = np.abs(z) / scale[group]
        robust_w = huber_weights(u, k)
        # Where every fitted value is finite these are the residuals about the line below, to the last bit: their
        # scale is taken once.
        about_line = ok.all()

    if fixed or not about_line:
        z = (y_used - (a[group] + b[group] * x)) * np.sqrt(model_w)
        scale = robust_scale(group, z, n_groups)
    clip_at = k * scale[group]
    count = np.bincount(group, minlength=n_groups).astype(float)
    psi2 = np.bincount(group, np.minimum(z * z, clip_at * clip_at), minlength=n_groups)
    inside = np.bincount(group, (np.abs(z) <= clip_at).astype(float), minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        dof = count - float(n_params)
        scale2 = np.where(dof > 0, psi2 / np.where(dof > 0, dof, 1.0), np.nan) / (inside / count) ** 2
    v_aa, v_ab, v_bb = inverse_design(group, x, model_w, n_groups)
    line = LineFit(
        a=a,
        b=b,
        var_a=scale2 * v_aa,
        var_b=scale2 * v_bb,
        cov_ab=scale2 * v_ab,
        scale=np.sqrt(scale2),
        dof=dof,
        n_points=count,
        x_mean=x_mean,
    )
    return line, robust_w
