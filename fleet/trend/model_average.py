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

from fleet.trend.wear_laws import MEMBERS, LawFits

# Hours grid (in units of the interval's current hours) on which the crossing is first bracketed: the readings'
# span, then geometric steps out to a million times it (no plan looks further).
_GRID_PAST = np.linspace(0.0, 1.0, 21)
_GRID_AHEAD = 1.0 + np.logspace(-3.0, 6.0, 91)
CROSSING_GRID = np.concatenate([_GRID_PAST, _GRID_AHEAD])
_BISECTIONS = 32


_POWER = np.array([m.law == "power" for m in MEMBERS])
_EXPONENT = np.array([m.power for m in MEMBERS])
_LOG_SPACE = np.array([m.log_space for m in MEMBERS])


def _per_group(values: np.ndarray, ndim: int) -> np.ndarray:
    """Per-group values (G,) or per group and member (G, M), shaped to broadcast against hours of `ndim`
    dimensions (first axis the group) with the members on a last axis."""
    if values.ndim == 1:
        return values.reshape(values.shape + (1,) * ndim)
    return values.reshape(values.shape[:1] + (1,) * (ndim - 1) + values.shape[1:])


def _moments(fits: LawFits, hours: np.ndarray):
    """Mean and standard deviation of every member's fitted line at hours, in its own space: hours (G, ...)
    gives arrays (G, ..., M), one call for all members (member_x of fleet.trend.wear_laws, all at once)."""
    h = hours[..., None]
    scale = _per_group(fits.hours_scale, hours.ndim)
    offset = _per_group(fits.hours_offset, hours.ndim)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        x = np.where(_POWER, np.maximum((h + offset) / scale, 0.0) ** _EXPONENT, h)
    a, b = _per_group(fits.a, hours.ndim), _per_group(fits.b, hours.ndim)
    var_a, var_b, cov = (_per_group(v, hours.ndim) for v in (fits.var_a, fits.var_b, fits.cov_ab))
    with np.errstate(invalid="ignore", over="ignore"):  # an unfitted group's NaN stays NaN (it has no weight)
        var = var_a + 2.0 * x * cov + x * x * var_b
        return a + b * x, np.sqrt(np.maximum(var, 0.0))


def value_cdf(fits: LawFits, hours, value, confidence: float) -> np.ndarray:
    """P(averaged trend at `hours` <= `value`), per group (broadcast over a (G, ...) array of hours).

    Each member with weight contributes weight x Phi(t x z/t-ratio); all members are computed in one pass over
    a last axis, so the cost per call does not grow with the number of members.
    """
    hours = np.asarray(hours, dtype=float)
    value = np.broadcast_to(np.asarray(value, dtype=float), hours.shape)[..., None]
    mean, sd = _moments(fits, hours)
    with np.errstate(invalid="ignore", divide="ignore"):
        level = np.where(_LOG_SPACE, np.log(np.where(value > 0, value, np.nan)), value)
        t = (level - mean) / sd
    t = np.where(sd > 0, t, np.where(level >= mean, np.inf, -np.inf))
    t = np.where(_LOG_SPACE & ~(value > 0), -np.inf, t)  # a log member never goes below zero flow
    w = _per_group(fits.weight, hours.ndim)
    p = special.ndtr(t * _per_group(fits.t_ratio(confidence), hours.ndim))
    return np.where(w > 0, w * np.nan_to_num(p, nan=0.5), 0.0).sum(axis=-1)


def value_quantile(fits: LawFits, hours, level, confidence: float) -> np.ndarray:
    """The `level` quantile of the averaged trend's value (a flow, L/min) at `hours` (G, ...); `level` is a
    number or an array broadcast against hours, so several quantiles come from one bisection. NaN for
    unfitted groups."""
    hours = np.asarray(hours, dtype=float)
    level = np.broadcast_to(np.asarray(level, dtype=float), hours.shape)
    mean, sd = _moments(fits, hours)
    spread = 10.0 * sd
    with np.errstate(over="ignore"):
        low = np.where(_LOG_SPACE, np.exp(mean - spread), mean - spread)
        high = np.where(_LOG_SPACE, np.exp(np.minimum(mean + spread, 700.0)), mean + spread)
    used = _per_group(fits.weight > 0, hours.ndim)
    lo = np.where(used & np.isfinite(low), low, np.inf).min(axis=-1)
    hi = np.where(used & np.isfinite(high), high, -np.inf).max(axis=-1)
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
        return 1.0 - value_cdf(fits, hours, limit_g[:, None], confidence)

    on_grid = crossed(grid)
    levels = np.asarray(levels, dtype=float)
    reached = on_grid[:, None, :] >= levels[None, :, None]  # (G, L, grid)
    any_reached = reached.any(axis=2) & ok[:, None]
    first = np.argmax(reached, axis=2)
    hi = np.take_along_axis(grid, first, axis=1)
    lo = np.take_along_axis(grid, np.maximum(first - 1, 0), axis=1)
    for _ in range(_BISECTIONS):  # every level at once
        mid = 0.5 * (lo + hi)
        up = crossed(mid) >= levels[None, :]
        lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
    x = np.where(first == 0, 0.0, hi)
    return list(np.where(any_reached, x, np.nan).T)
