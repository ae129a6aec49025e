"""Model-averaged forecasts: the value of a wear trend at any hours, and the hours at which it reaches a limit.

Each member of the model set (fleet.trend.wear_laws) says, at hours h, that its fitted mean line lies about
its estimate with a t distribution. The averaged forecast is the mixture of the members with their model
weights: its quantiles give the forecast (the median) and the band, the model-averaged tail-area interval of
Turek & Fletcher (2012, Comput. Stat. Data Anal. 56: 2809-2815). The crossing hours come from the same
mixture: P(crossed by h) = P(value at h >= limit), and its quantiles give the forecast crossing and its bounds.
With a single member this is the Fieller (inverse prediction) interval, because each member's t statistic is
scaled to a normal one with the same two-sided quantile: then that member's bounds are reproduced exactly.
Where the mixture never reaches a level (the trend may stay flat), that bound stays open (NaN).
"""

import numpy as np
from scipy import special

from fleet.trend.wear_laws import MEMBERS, LawFits, member_x, run_in_dx_du

# Hours grid (in units of the interval's current hours) on which the crossing is first bracketed: the readings'
# span, then geometric steps out to a million times it (no plan looks further).
_GRID_PAST = np.linspace(0.0, 1.0, 21)
_GRID_AHEAD = 1.0 + np.logspace(-3.0, 6.0, 91)
CROSSING_GRID = np.concatenate([_GRID_PAST, _GRID_AHEAD])
_BISECTIONS = 32


def _moments(fits: LawFits, j: int, hours: np.ndarray):
    """Mean and standard deviation of member j's fitted line at hours (shape (G,) or (G, K)), its own space."""
    hours = np.asarray(hours, dtype=float)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    m = MEMBERS[j]
    x = member_x(m, hours, fits.hours_scale[expand], fits.hours_offset[expand])
    a, b = fits.a[:, j][expand], fits.b[:, j][expand]
    with np.errstate(invalid="ignore", over="ignore"):  # an unfitted group's NaN stays NaN (it has no weight)
        var = fits.var_a[:, j][expand] + 2.0 * x * fits.cov_ab[:, j][expand] + x * x * fits.var_b[:, j][expand]
        return a + b * x, np.sqrt(np.maximum(var, 0.0))


def _cdf_terms(fits: LawFits, hours, value, confidence: float):
    """Yield (weight, P(member's line at hours <= value)) for each member with some weight."""
    hours = np.asarray(hours, dtype=float)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    value = np.asarray(value, dtype=float)
    for j, m in enumerate(MEMBERS):
        w = fits.weight[:, j]
        if not np.any(w > 0):
            continue
        mean, sd = _moments(fits, j, hours)
        with np.errstate(invalid="ignore", divide="ignore"):
            level = np.log(np.where(value > 0, value, np.nan)) if m.log_space else value
            t = (level - mean) / sd
        t = np.where(sd > 0, t, np.where(level >= mean, np.inf, -np.inf))
        if m.log_space:
            t = np.where(value > 0, t, -np.inf)  # a log member never goes below zero flow
        p = special.ndtr(t * fits.t_ratio(confidence)[:, j][expand])
        yield w[expand], np.where(w[expand] > 0, np.nan_to_num(p, nan=0.5), 0.0)


def value_cdf(fits: LawFits, hours, value, confidence: float) -> np.ndarray:
    """P(averaged trend at `hours` <= `value`), per group (broadcast over a (G, K) grid of hours)."""
    total = 0.0
    for w, p in _cdf_terms(fits, hours, value, confidence):
        total = total + w * p
    return np.asarray(total, dtype=float) * np.ones(np.shape(hours))


def value_quantile(fits: LawFits, hours, level: float, confidence: float) -> np.ndarray:
    """The `level` quantile of the averaged trend's value (a flow, L/min) at `hours`; NaN for unfitted groups."""
    hours = np.asarray(hours, dtype=float)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    lo = np.full(hours.shape, np.inf)
    hi = np.full(hours.shape, -np.inf)
    for j, m in enumerate(MEMBERS):
        used = (fits.weight[:, j] > 0)[expand]
        mean, sd = _moments(fits, j, hours)
        spread = 10.0 * sd
        with np.errstate(over="ignore"):
            low, high = (np.exp(mean - spread), np.exp(np.minimum(mean + spread, 700.0))) if m.log_space else (
                mean - spread, mean + spread)
        lo = np.where(used & np.isfinite(low), np.minimum(lo, low), lo)
        hi = np.where(used & np.isfinite(high), np.maximum(hi, high), hi)
    fitted = np.isfinite(lo) & np.isfinite(hi)
    lo, hi = np.where(fitted, lo, 0.0), np.where(fitted, hi, 1.0)
    for _ in range(44):  # the bracket shrinks to 1e-13 of its width
        mid = 0.5 * (lo + hi)
        below = value_cdf(fits, hours, mid, confidence) < level
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    return np.where(fitted, 0.5 * (lo + hi), np.nan)


def averaged_slope(fits: LawFits, hours) -> np.ndarray:
    """Model-weighted mean of the members' growth rates dq/dh (L/min per hour) at `hours` (per group)."""
    h = np.asarray(hours, dtype=float)
    total = np.zeros(len(fits))
    for j, m in enumerate(MEMBERS):
        w, a, b = fits.weight[:, j], fits.a[:, j], fits.b[:, j]
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            if m.log_space:
                rate = b * np.exp(a + b * h)
            elif m.law == "power":
                u = np.maximum((h + fits.hours_offset) / fits.hours_scale, 0.0)
                rate = b * m.power * u ** (m.power - 1.0) / fits.hours_scale
            elif m.law == "run_in":
                u = np.maximum((h + fits.hours_offset) / fits.hours_scale, 0.0)
                rate = b * run_in_dx_du(u, m.tau, m.share) / fits.hours_scale
            else:
                rate = b
        total = total + np.where(w > 0, w * np.nan_to_num(rate, nan=0.0, posinf=0.0, neginf=0.0), 0.0)
    return np.where(fits.weight.sum(axis=1) > 0, total, np.nan)


def crossing_quantiles(fits: LawFits, limit, now_hours, levels, confidence: float) -> list[np.ndarray]:
    """Interval hours at which P(averaged trend >= limit) first reaches each of `levels`, per group.

    limit: a flow (L/min) per group; now_hours: the interval's current hours (sets the search grid). A level
    the mixture never reaches within a million times the current hours gives NaN (open); one already reached
    at the interval start gives 0.
    """
    limit = np.asarray(limit, dtype=float)
    now = np.asarray(now_hours, dtype=float)
    ok = np.isfinite(limit) & (limit > 0) & np.isfinite(now) & (now > 0) & (fits.weight.sum(axis=1) > 0)
    span = np.where(ok, now, 1.0)
    grid = span[:, None] * CROSSING_GRID[None, :]
    limit_g = np.where(ok, limit, 1.0)

    def crossed(hours):
        return 1.0 - value_cdf(fits, hours, limit_g[:, None] if np.ndim(hours) == 2 else limit_g, confidence)

    on_grid = crossed(grid)
    rows = np.arange(len(now))
    out = []
    for level in levels:
        reached = on_grid >= level
        any_reached = reached.any(axis=1) & ok
        first = np.argmax(reached, axis=1)
        hi = grid[rows, first]
        lo = grid[rows, np.maximum(first - 1, 0)]
        for _ in range(_BISECTIONS):
            mid = 0.5 * (lo + hi)
            up = crossed(mid) >= level
            lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
        x = np.where(first == 0, 0.0, hi)
        out.append(np.where(any_reached, x, np.nan))
    return out
