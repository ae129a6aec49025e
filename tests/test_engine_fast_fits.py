"""The engine's fitting numerics, made faster, give the figures of the plain code they replaced.

The plain implementations are kept here, small and unoptimised, as the reference: each test runs the whole
engine once with them patched in and once as it stands, and every output (results, interval fits, service
intervals) must agree to 1e-9 relative. The plain code's own figures are checked against outside sources in
tests/test_trend_wear_laws.py and its neighbours (statsmodels' WLS, scipy's distributions); here the
reference is the project's earlier code, so only an exact rewrite can pass. Data: the invented demo plant and
an invented fleet of mixed wear laws from benchmarks/calibration.py (all pumps and readings invented).
"""

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from benchmarks.calibration import invented_fleet
from fleet.services.analysis.frames import load_frames
from fleet.trend import linear, robust, wear_laws
from fleet.trend.engine import analyze_fleet
from fleet.trend.settings import AnalysisSettings
from tests.frame_compare import same_frames

NOW = dt.datetime(2026, 12, 1, 12)


def reference_family_members(family, group, hours, q, sigma, robust_w, clip, hours_scale, offset, n_groups, out,
                        deviance, only=None):
    """The family fit as it was: one member at a time, eight grouped sums each."""
    rows = slice(None)
    if only is not None:
        keep = only[group]
        group, hours, q, sigma, robust_w = group[keep], hours[keep], q[keep], sigma[keep], robust_w[keep]
        rows = only
    model_w = 1.0 / sigma**2
    w = model_w * robust_w
    count = np.bincount(group, minlength=n_groups).astype(float)
    s0 = np.bincount(group, w, minlength=n_groups)
    sy = np.bincount(group, w * q, minlength=n_groups)
    m0 = np.bincount(group, model_w, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        u = np.maximum((hours + offset[group]) / hours_scale[group], 0.0)
        log_u = np.log(np.maximum(u, 1e-300))
    clip2 = clip[group] ** 2
    for j, m in enumerate(wear_laws.MEMBERS):
        if m.law != family:
            continue
        # Raw sums are safe here: every family's x lies in [0, 1] over the readings.
        x = np.exp(m.power * log_u) if family == "power" else wear_laws.run_in_x(u, m.tau, m.share)
        wx = w * x
        sx = np.bincount(group, wx, minlength=n_groups)
        sxx = np.bincount(group, wx * x, minlength=n_groups)
        sxy = np.bincount(group, wx * q, minlength=n_groups)
        mx_sum = np.bincount(group, model_w * x, minlength=n_groups)
        mxx_sum = np.bincount(group, model_w * x * x, minlength=n_groups)
        with np.errstate(invalid="ignore", divide="ignore"):
            x_mean, y_mean = sx / s0, sy / s0
            spread = sxx - sx * x_mean
            b = np.where(spread > 1e-12 * s0, (sxy - sx * y_mean) / spread, np.nan)  # no spread: one hour value
            a = y_mean - b * x_mean
            z2 = (q - a[group] - b[group] * x) ** 2 * model_w
            psi2 = np.bincount(group, np.minimum(z2, clip2), minlength=n_groups)
            inside = np.bincount(group, z2 <= clip2, minlength=n_groups)
            dof = count - m.n_params
            scale2 = np.where(dof > 0, psi2 / np.where(dof > 0, dof, 1.0), np.nan) / (inside / count) ** 2
            mx = mx_sum / m0
            msxx = mxx_sum - mx_sum * mx
            inv_sxx = np.where(msxx > 1e-12 * m0, 1.0 / msxx, np.nan)
            var_a = scale2 * (1.0 / m0 + mx**2 * inv_sxx)  # NaN for a group without readings
        values = {"a": a, "b": b, "var_a": var_a, "var_b": scale2 * inv_sxx, "cov_ab": -scale2 * mx * inv_sxx,
                  "dof": dof, "scale": np.sqrt(scale2)}
        for name, value in values.items():
            out[name][rows, j] = value[rows]
        deviance[rows, j] = psi2[rows]



def reference_identifiable(group, hours, hours_scale, offset, n_groups):
    """Which run-in members the readings identify, as it was: one count per member."""
    ok = np.ones((n_groups, len(wear_laws.MEMBERS)), dtype=bool)
    with np.errstate(invalid="ignore", divide="ignore"):
        u = (hours + offset[group]) / hours_scale[group]
    for j, m in enumerate(wear_laws.MEMBERS):
        if m.law == "run_in":
            ok[:, j] = np.bincount(group, u <= wear_laws.RUN_IN_REACH * m.tau, minlength=n_groups) >= 2
    return ok


def reference_centred_on(self, other, group, hours, value, sigma, settings) -> None:
    """LawFits.centred_on as it was: one member at a time."""
    n_groups = len(self)
    count = np.bincount(group, minlength=n_groups).astype(float)
    same = (np.isclose(other.hours_scale, self.hours_scale) & np.isclose(other.hours_offset, self.hours_offset)
            & (count >= 4) & (np.nan_to_num(other.n_points) >= settings.min_points))
    refuted_at = stats.f.ppf(0.99, 1, np.maximum(count - 2, 1))
    centre_a, centre_b = self.a.copy(), self.b.copy()
    w_all = 1.0 / np.asarray(sigma, dtype=float) ** 2
    value_all = np.asarray(value, dtype=float)
    hours_all = np.asarray(hours, dtype=float)
    weighed = (self.weight > 0) & same[:, None]  # a member without weight moves no forecast
    for j in np.flatnonzero(weighed.any(axis=0)):
        m = wear_laws.MEMBERS[j]
        at = weighed[group, j]  # the readings of the groups concerned only
        g, h, q, w = group[at], hours_all[at], value_all[at], w_all[at]
        x = wear_laws.member_x(m, h, other.hours_scale[g], other.hours_offset[g])
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            line = other.a[g, j] + other.b[g, j] * x
            shape = np.exp(line) if m.log_space else line
            ok = np.isfinite(shape)
            k, robust = reference_through_origin(g, np.where(ok, shape, 0.0), q, np.where(ok, w, 0.0), n_groups,
                                        settings.huber_k)
            own = self.a[g, j] + self.b[g, j] * x
            own = np.exp(own) if m.log_space else own
            rw = w * robust
            shared = np.bincount(g, np.nan_to_num(rw * (q - k[g] * shape) ** 2), minlength=n_groups)
            alone = np.bincount(g, np.nan_to_num(rw * (q - own) ** 2), minlength=n_groups)
            f_stat = (shared - alone) / (alone / np.maximum(count - 2, 1))
            a = other.a[:, j] + np.log(k) if m.log_space else k * other.a[:, j]
            b = other.b[:, j] if m.log_space else k * other.b[:, j]
        use = weighed[:, j] & (k > 0) & np.isfinite(a) & np.isfinite(b) & ~(f_stat > refuted_at)
        centre_a[:, j] = np.where(use, a, centre_a[:, j])
        centre_b[:, j] = np.where(use, b, centre_b[:, j])
    self.centre_a, self.centre_b = centre_a, centre_b


def reference_through_origin(group, x, y, w, n_groups, huber_k: float) -> tuple[np.ndarray, np.ndarray]:
    """The slope through the origin with Huber passes, as it was."""
    robust = np.ones_like(y)
    for _ in range(4):
        sxx = np.bincount(group, w * robust * x * x, minlength=n_groups)
        with np.errstate(invalid="ignore", divide="ignore"):
            k = np.where(sxx > 0, np.bincount(group, w * robust * x * y, minlength=n_groups) / sxx, np.nan)
            z = (y - k[group] * x) * np.sqrt(w)
            u = np.abs(z) / reference_mad_scale(group, np.nan_to_num(z), n_groups)[group]
            robust = np.where(u > huber_k, huber_k / u, 1.0)
    return k, robust


def reference_mad_scale(group, z, n_groups) -> np.ndarray:
    """1.4826 x median |z| per group (never below 1) by one lexical sort, as it was."""
    a = np.abs(z)
    order = np.lexsort((a, group))
    count = np.bincount(group, minlength=n_groups)
    start = np.concatenate([[0], np.cumsum(count)[:-1]])
    sorted_a = a[order]
    has = count > 0
    lo = sorted_a[np.where(has, start + (count - 1) // 2, 0)] if a.size else np.zeros(n_groups)
    hi = sorted_a[np.where(has, start + count // 2, 0)] if a.size else np.zeros(n_groups)
    return np.maximum(1.4826 * np.where(has, 0.5 * (lo + hi), 1.0), 1.0)


def reference_reweighted(
    group: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    variance_of_fit,
    n_groups: int,
    settings,
    log_scale: bool = False,
    n_params: int = 2,
    robust_w: np.ndarray | None = None,
):
    """The robust line fit as it was: every group refitted in every pass."""
    k = settings.huber_k
    variance = variance_of_fit(None)
    model_w = 1.0 / variance
    bias = 0.5 if log_scale else 0.0
    y_used = y + bias * variance
    fixed = robust_w is not None
    a, b, x_mean = linear.grouped_line(group, x, y_used, model_w * (robust_w if fixed else 1.0), n_groups)
    if not fixed:
        robust_w = np.ones_like(y)
        previous = None
        done = np.zeros(n_groups, dtype=bool)
        for _ in range(settings.irls_iterations):
            fitted = a[group] + b[group] * x
            ok = np.isfinite(fitted)
            if previous is not None:
                # A group whose fitted values moved less than the tolerance keeps its line from now on; each
                # group's result depends on its own readings only, whichever pumps are analysed with it.
                moved = ok & (np.abs(fitted - previous) > settings.irls_tolerance * (1.0 + np.abs(fitted)))
                done |= np.bincount(group, moved, minlength=n_groups) == 0
                if done.all():
                    break
            previous = fitted
            variance = np.where(ok, variance_of_fit(np.where(ok, fitted, y)), variance)
            model_w = 1.0 / variance
            y_used = y + bias * variance
            z = (y_used - np.where(ok, fitted, y_used)) * np.sqrt(model_w)
            u = np.abs(z) / robust.robust_scale(group, z, n_groups)[group]
            with np.errstate(divide="ignore", invalid="ignore"):
                robust_w = np.where(u > k, k / u, 1.0)
            a_new, b_new, x_mean_new = linear.grouped_line(group, x, y_used, model_w * robust_w, n_groups)
            a, b, x_mean = np.where(done, a, a_new), np.where(done, b, b_new), np.where(done, x_mean, x_mean_new)
        # The error model and the Huber weights at the final line, so that they depend on it alone (not on
        # whether the passes stopped because this group or the last one had converged).
        fitted = a[group] + b[group] * x
        ok = np.isfinite(fitted)
        variance = np.where(ok, variance_of_fit(np.where(ok, fitted, y)), variance)
        model_w = 1.0 / variance
        y_used = y + bias * variance
        z = (y_used - np.where(ok, fitted, y_used)) * np.sqrt(model_w)
        u = np.abs(z) / robust.robust_scale(group, z, n_groups)[group]
        with np.errstate(divide="ignore", invalid="ignore"):
            robust_w = np.where(u > k, k / u, 1.0)

    z = (y_used - (a[group] + b[group] * x)) * np.sqrt(model_w)
    clip_at = k * robust.robust_scale(group, z, n_groups)[group]
    count = np.bincount(group, minlength=n_groups).astype(float)
    psi2 = np.bincount(group, np.minimum(z * z, clip_at * clip_at), minlength=n_groups)
    inside = np.bincount(group, (np.abs(z) <= clip_at).astype(float), minlength=n_groups)
    with np.errstate(divide="ignore", invalid="ignore"):
        dof = count - float(n_params)
        scale2 = np.where(dof > 0, psi2 / np.where(dof > 0, dof, 1.0), np.nan) / (inside / count) ** 2
    v_aa, v_ab, v_bb = linear.inverse_design(group, x, model_w, n_groups)
    line = linear.LineFit(
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


def reference_best_family_huber(family, group, hours, q, sigma, out, deviance, hours_scale, offset, n_groups,
                                settings):
    """The Huber weights about each group's best line of the family, as it was: one mask over every reading per
    best member."""
    of_family = np.array([m.law == family for m in wear_laws.MEMBERS])
    family_dev = np.where(np.isfinite(deviance[:, of_family]), deviance[:, of_family], np.inf)
    best = np.flatnonzero(of_family)[np.argmin(family_dev, axis=1)]
    fitted = np.full(len(q), np.nan)
    for j in np.unique(best):
        at = best[group] == j
        x = wear_laws.member_x(wear_laws.MEMBERS[j], hours[at], hours_scale[group[at]], offset[group[at]])
        fitted[at] = out["a"][group[at], j] + out["b"][group[at], j] * x
    z = (q - fitted) / sigma
    u = np.abs(z) / robust.robust_scale(group, z, n_groups)[group]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(u > settings.huber_k, settings.huber_k / u, 1.0)


REFERENCES = {
    (wear_laws, "_best_family_huber"): reference_best_family_huber,
    (wear_laws, "_fit_family_members"): reference_family_members,
    (wear_laws, "run_in_identifiable"): reference_identifiable,
    (wear_laws.LawFits, "centred_on"): reference_centred_on,
    (wear_laws, "fit_reweighted"): reference_reweighted,
}


def _with(monkeypatch, plain: bool, run):
    """run() with the plain reference implementations patched in (plain=True) or the code as it stands."""
    with monkeypatch.context() as patch:
        if plain:
            for (where, name), function in REFERENCES.items():
                patch.setattr(where, name, function)
        return run()


def _same_analysis(expected, got) -> None:
    for what in ("results", "fits", "intervals"):
        same_frames(getattr(expected, what), getattr(got, what), what, atol=1e-12)


def test_the_demo_plant_gets_the_plain_codes_figures(demo_db, monkeypatch):
    with demo_db.sessions() as session:
        frames = load_frames(session, None, as_of=NOW)

    def run():
        return analyze_fleet(frames.pumps, frames.readings, frames.events, frames.samples, frames.flow_points,
                             now=NOW)

    plain, fast = _with(monkeypatch, True, run), _with(monkeypatch, False, run)
    assert (plain.fits["slip_weight_run_in"] > 0).any()  # the families were fitted and weigh in
    _same_analysis(plain, fast)


@pytest.mark.parametrize("weighting", ["aicc", "held_back"])
def test_a_fleet_of_mixed_wear_laws_gets_the_plain_codes_figures(monkeypatch, weighting):
    pumps, readings, events, _truth = invented_fleet(seed=11, n=160)
    now = readings["taken_at"].max() + pd.Timedelta(days=1)
    settings = AnalysisSettings(law_weighting=weighting)

    def run():
        return analyze_fleet(pumps, readings, events, None, now=now, settings=settings)

    plain, fast = _with(monkeypatch, True, run), _with(monkeypatch, False, run)
    laws = set(plain.fits["slip_wear_law"].dropna())
    assert {"power", "run_in"} <= laws  # both families decide some forecasts
    _same_analysis(plain, fast)


@pytest.mark.parametrize("log_scale", [False, True])
@pytest.mark.parametrize("unfitted", [False, True])
def test_reweighting_on_the_moving_groups_alone_gives_the_plain_passes_figures_exactly(monkeypatch, log_scale,
                                                                                       unfitted):
    # fit_reweighted leaves the readings of settled groups out of later passes, and takes the residuals' scale
    # about the final line once where every fitted value is finite; the plain code (every reading in every pass,
    # kept above) is the reference, to the last bit. Invented groups: straight lines with noise, a few gross
    # outliers in some (they take more passes), one group without readings; `unfitted`: one group of a single
    # hour too (no line, so no finite fitted values).
    rng = np.random.default_rng(5)
    n_groups = 120
    sizes = rng.integers(6, 60, n_groups)
    sizes[17] = 0
    group = np.repeat(np.arange(n_groups), sizes)
    x = rng.uniform(0.0, 5000.0, group.size)
    if unfitted:
        x[group == 40] = 1200.0  # no spread: no line
    level = np.exp(rng.normal(0.0, 0.3, n_groups))[group] * (1.0 + 2e-4 * x)
    y = level * (1.0 + 0.02 * rng.normal(size=group.size))
    wild = (rng.random(group.size) < 0.04) & (group % 3 == 0)
    y[wild] *= rng.uniform(1.5, 3.0, int(wild.sum()))
    if log_scale:
        y = np.log(y)

    def variance_of_fit(fitted):  # a relative error model that follows the fitted line, as the case drain's
        centre = y if fitted is None else fitted
        return (0.02 * (np.exp(centre) if log_scale else centre)) ** 2 + 1e-6

    sizes_seen = []
    scale = robust.robust_scale
    monkeypatch.setattr(robust, "robust_scale", lambda g, z, n: sizes_seen.append(len(z)) or scale(g, z, n))
    settings = AnalysisSettings()
    got, got_w = robust.fit_reweighted(group, x, y, variance_of_fit, n_groups, settings, log_scale)
    assert min(sizes_seen) < group.size  # some passes ran on the moving groups alone
    expected, expected_w = reference_reweighted(group, x, y, variance_of_fit, n_groups, settings, log_scale)
    for name in ("a", "b", "var_a", "var_b", "cov_ab", "scale", "dof", "n_points", "x_mean"):
        np.testing.assert_array_equal(getattr(got, name), getattr(expected, name), err_msg=name)
    np.testing.assert_array_equal(got_w, expected_w)
