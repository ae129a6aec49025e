"""Wear trends: log-linear growth of the referred leakage with running hours, per pump interval.

Wear opens the clearances and laminar leakage grows with the cube of the gap, so the referred slip (and
the referred case drain) grows roughly exponentially: ln(q_ref) = a + b h, h = hours in the interval.
All pump intervals are fitted at once (grouped sums, a few reweighting passes), never one solver call per pump.
"""

import numpy as np
import pandas as pd

from fleet.trend.linear import LineFit, grouped_wls, inverse_design
from fleet.trend.settings import AnalysisSettings

QUANTITIES = ("slip", "drain")


def _robust_scale(group: np.ndarray, z: np.ndarray, n_groups: int) -> np.ndarray:
    """Per group 1.4826 x median |z| (MAD about the line), never below 1: the error model's own scatter."""
    mad = pd.Series(np.abs(z)).groupby(group).median().reindex(range(n_groups)).to_numpy()
    return np.maximum(1.4826 * np.nan_to_num(mad, nan=1.0), 1.0)


def _fit_reweighted(
    group: np.ndarray,
    hours: np.ndarray,
    log_value: np.ndarray,
    variance_of_fit,
    n_groups: int,
    settings: AnalysisSettings,
) -> LineFit:
    """Robust weighted line fit of log_value on hours per group (IRLS with Huber weights).

    variance_of_fit(fitted_log or None) gives each point's variance under the error model; it is
    re-evaluated at the fitted line so that a single noisy point does not set its own weight. Huber
    weights downweight outliers; the robust scale never drops below 1, the scatter the error model
    itself explains, so ordinary noise is never treated as an outlier. The covariance is Huber's
    sandwich, scale^2 = sum psi^2 / (n - 2) / mean(psi')^2 times (X'WX)^-1 of the error-model weights,
    which stays honest when ordinary tails get clipped (a plain weighted residual sum would shrink).
    """
    k = settings.huber_k
    variance = variance_of_fit(None)
    model_w = 1.0 / variance
    robust_w = np.ones_like(hours)
    # The log of a noisy flow is biased low by about half its variance (second-order Taylor term); put
    # it back, or low-slip (early, cold, low-pressure) readings would tilt the slope.
    y = log_value + 0.5 * variance
    fit = grouped_wls(group, hours, y, model_w, n_groups)
    for _ in range(settings.irls_iterations):
        fitted = fit.a[group] + fit.b[group] * hours
        ok = np.isfinite(fitted)
        variance = np.where(ok, variance_of_fit(np.where(ok, fitted, log_value)), variance)
        model_w = 1.0 / variance
        y = log_value + 0.5 * variance
        z = (y - np.where(ok, fitted, y)) * np.sqrt(model_w)
        u = np.abs(z) / _robust_scale(group, z, n_groups)[group]
        with np.errstate(divide="ignore", invalid="ignore"):
            robust_w = np.where(u > k, k / u, 1.0)
        fit = grouped_wls(group, hours, y, model_w * robust_w, n_groups)

    z = (y - (fit.a[group] + fit.b[group] * hours)) * np.sqrt(model_w)
    clip_at = k * _robust_scale(group, z, n_groups)[group]
    count = np.bincount(group, minlength=n_groups).astype(float)
    psi2 = np.bincount(group, np.minimum(z * z, clip_at * clip_at), minlength=n_groups)
    inside = np.bincount(group, (np.abs(z) <= clip_at).astype(float), minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        dof = count - 2.0
        scale2 = np.where(dof > 0, psi2 / np.where(dof > 0, dof, 1.0), np.nan) / (inside / count) ** 2
    v_aa, v_ab, v_bb = inverse_design(group, hours, model_w, n_groups)
    return LineFit(
        a=fit.a,
        b=fit.b,
        var_a=scale2 * v_aa,
        var_b=scale2 * v_bb,
        cov_ab=scale2 * v_ab,
        scale=np.sqrt(scale2),
        dof=dof,
        n_points=count,
        x_mean=fit.x_mean,
    )


def _span(group: np.ndarray, hours: np.ndarray, n_groups: int) -> np.ndarray:
    s = pd.Series(hours).groupby(group)
    span = (s.max() - s.min()).reindex(range(n_groups))
    return span.to_numpy(dtype=float)


def _as_frame(fit: LineFit, span: np.ndarray, current_hours: np.ndarray, prefix: str) -> pd.DataFrame:
    with np.errstate(over="ignore"):
        current = np.exp(fit.a + fit.b * current_hours)
    cols = {
        "n_points": fit.n_points.astype(np.int64),
        "span_hours": span,
        "a": fit.a,
        "b": fit.b,
        "var_a": fit.var_a,
        "var_b": fit.var_b,
        "cov_ab": fit.cov_ab,
        "scale": fit.scale,
        "dof": fit.dof,
        "current_lpm": current,
    }
    return pd.DataFrame({f"{prefix}_{k}": v for k, v in cols.items()})


def fit_degradation(referred: pd.DataFrame, settings: AnalysisSettings | None = None) -> pd.DataFrame:
    """Fit ln(slip_ref) and ln(drain_ref) against interval hours for every pump interval.

    referred: refer_readings output with intervals assigned (pump_id, interval_no, interval_hours).
    Only unflagged readings feed the fits. Error model of the slip: flow-meter noise sigma_Q = noise
    fraction x reading, so var(ln slip_ref) ~ (sigma_Q / slip_raw)^2 with slip_raw the raw (unreferred)
    slip: a reading with a small raw slip (low pressure, cold oil) says little about the clearances. The
    raw slip is floored at a small positive value so noise pushing flow above theoretical does not break
    the log. The case drain is measured directly, with a constant relative noise.

    Returns one row per pump interval: pump_id, interval_no, current_hours (latest hours in the interval),
    and per quantity q in (slip, drain): q_n_points, q_span_hours, q_a, q_b, q_var_a, q_var_b, q_cov_ab,
    q_scale, q_dof, q_current_lpm (fitted value at current_hours). Derived eta_v_ref figures are added by
    `summarise_fits`.
    """
    s = settings or AnalysisSettings()
    keys = referred[["pump_id", "interval_no"]].drop_duplicates().sort_values(["pump_id", "interval_no"])
    keys = keys.reset_index(drop=True)
    n_groups = len(keys)
    code_of = pd.Series(np.arange(n_groups), index=pd.MultiIndex.from_frame(keys))
    group_all = code_of.reindex(pd.MultiIndex.from_frame(referred[["pump_id", "interval_no"]])).to_numpy()

    hours = pd.to_numeric(referred["interval_hours"], errors="coerce").to_numpy(dtype=float)
    valid_hours = np.isfinite(hours) & (hours >= 0)
    current_hours = (
        pd.Series(np.where(valid_hours, hours, np.nan)).groupby(group_all).max().reindex(range(n_groups))
    ).to_numpy(dtype=float)
    good = referred["flag"].isna().to_numpy() & valid_hours

    frames = [keys.assign(current_hours=current_hours)]

    # Slip: error model from the flow meter.
    rated = referred["rated_flow_lpm"].to_numpy(dtype=float)
    floor = s.slip_floor_fraction * rated
    slip_raw = referred["slip_lpm"].to_numpy(dtype=float)
    factor = referred["referral_factor"].to_numpy(dtype=float)
    flow = referred["flow_lpm"].to_numpy(dtype=float)
    use = good & np.isfinite(slip_raw) & np.isfinite(factor) & (factor > 0) & np.isfinite(flow) & (floor > 0)
    g, h = group_all[use], hours[use]
    floor_u, factor_u = floor[use], factor[use]
    sigma_q = s.flow_noise_fraction * np.abs(flow[use])
    sigma_q = np.maximum(sigma_q, 1e-6 * rated[use])  # a zero flow reading still has meter noise
    with np.errstate(divide="ignore", invalid="ignore"):
        log_slip_ref = np.log(np.maximum(slip_raw[use], floor_u) * factor_u)

    def slip_variance(fitted_log):
        if fitted_log is None:
            raw = np.maximum(slip_raw[use], floor_u)
        else:
            with np.errstate(over="ignore"):
                raw = np.maximum(np.exp(fitted_log) / factor_u, floor_u)
        return (sigma_q / raw) ** 2

    slip_fit = _fit_reweighted(g, h, log_slip_ref, slip_variance, n_groups, s)
    frames.append(_as_frame(slip_fit, _span(g, h, n_groups), current_hours, "slip"))

    # Case drain: measured directly, constant relative noise -> constant variance in log space.
    drain_ref = referred["drain_ref_lpm"].to_numpy(dtype=float)
    use_d = good & np.isfinite(drain_ref) & (floor > 0)
    gd, hd = group_all[use_d], hours[use_d]
    with np.errstate(divide="ignore", invalid="ignore"):
        drain_floor = floor[use_d] * factor[use_d]
        log_drain = np.log(np.maximum(drain_ref[use_d], drain_floor))
    unit_variance = np.full(len(gd), s.drain_noise_fraction**2)
    drain_fit = _fit_reweighted(gd, hd, log_drain, lambda _fitted: unit_variance, n_groups, s)
    frames.append(_as_frame(drain_fit, _span(gd, hd, n_groups), current_hours, "drain"))
    return pd.concat(frames, axis=1)


def enough_data(n_points: np.ndarray, span_hours: np.ndarray, settings: AnalysisSettings) -> np.ndarray:
    """The minimum data for a pump's own trend: enough usable readings over enough running hours."""
    n = np.nan_to_num(np.asarray(n_points, dtype=float))
    span = np.nan_to_num(np.asarray(span_hours, dtype=float))
    return (n >= settings.min_points) & (span >= settings.min_span_hours)


def not_enough_reason(n_points: np.ndarray, span_hours: np.ndarray, settings: AnalysisSettings, what: str):
    """A sentence saying why a trend was not fitted, or None where it was."""
    n = np.nan_to_num(np.asarray(n_points, dtype=float)).astype(int)
    span = np.nan_to_num(np.asarray(span_hours, dtype=float))
    ok = enough_data(n, span, settings)
    text = [
        None
        if fine
        else f"Not enough data for the {what} trend: {k} usable reading{'s' if k != 1 else ''} spanning "
        f"{sp:.0f} h (needs {settings.min_points} over {settings.min_span_hours:.0f} h)."
        for fine, k, sp in zip(ok, n, span, strict=True)
    ]
    return np.array(text, dtype=object)


def summarise_fits(fits: pd.DataFrame, rated_flow_lpm: np.ndarray, max_flow_lpm: np.ndarray, settings) -> pd.DataFrame:
    """Add the figures people read: eta_v,ref now, its decline per 1000 h, drain % now, data sufficiency.

    eta_v,ref = 1 - slip_ref / rated flow, so d(eta)/dh = -b slip_ref(h) / rated flow; the decline is
    reported positive when the pump is losing efficiency (fraction per 1000 h).
    """
    out = fits.copy()
    rated = np.asarray(rated_flow_lpm, dtype=float)
    max_flow = np.asarray(max_flow_lpm, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        out["eta_v_ref"] = 1.0 - out["slip_current_lpm"].to_numpy() / rated
        out["eta_v_decline_per_1000h"] = 1000.0 * out["slip_b"].to_numpy() * out["slip_current_lpm"].to_numpy() / rated
        out["drain_pct_ref"] = 100.0 * out["drain_current_lpm"].to_numpy() / max_flow
    for q in QUANTITIES:
        ok = enough_data(out[f"{q}_n_points"], out[f"{q}_span_hours"], settings)
        out[f"{q}_enough_data"] = ok
    out.loc[~out["slip_enough_data"], ["eta_v_ref", "eta_v_decline_per_1000h"]] = np.nan
    out.loc[~out["drain_enough_data"], "drain_pct_ref"] = np.nan
    return out
