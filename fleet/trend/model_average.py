"""Model-averaged forecasts: the value of a wear trend at any hours, and the hours at which it reaches a limit.

Each member of the model set (fleet.trend.wear_laws) says, at hours h, that its fitted mean line lies about
its estimate with a t distribution. The averaged forecast is the mixture of the members with their model
weights: its quantiles give the forecast (the median) and the band, the model-averaged tail-area interval of
Turek & Fletcher (2012, Comput. Stat. Data Anal. 56: 2809-2815). The crossing hours come from the same
mixture: P(crossed by h) = P(value at h >= limit), and its quantiles give the forecast crossing and its bounds.
With a single member this is the Fieller (inverse prediction) interval, because each member's t statistic is
scaled to a normal one with the same two-sided quantile: then that member's bounds are reproduced exactly.
Where the mixture never reaches a level (the trend may stay flat), that bound stays open (NaN).

What the pages and the plan read (crossing_band, value_band) takes these pieces one law at a time: the forecast
is the heaviest law's own median, the band the union of the bands of the laws the readings cannot rule out. The
median is taken on the lines and weights the forecast follows (LawFits.centred: for the slip, the case drain's
shape at the slip's level; with a pooled shape prior, its weights), the bands on the trend's own lines and weights
(with the forecast's law among them); the band is widened to hold the forecast where it lies past.
"""

import dataclasses

import numpy as np
from scipy import special

from fleet.trend.wear_laws import LAWS, MEMBERS, LawFits, member_x, run_in_dx_du, run_in_x

# The laws the readings cannot rule out: those whose Akaike weight is at least this share of the heaviest law's
# (an evidence ratio of at most 8: Royall 1997, the 1/8 likelihood interval, which Burnham & Anderson 2002
# carry over to a confidence set of models; cited from memory). The band is the union of their own bands.
CONFIDENCE_SET_RATIO = 1.0 / 8.0

# Hours grid (in units of the interval's current hours) on which the crossing is first bracketed: the readings'
# span, then geometric steps out to a million times it (no plan looks further).
_GRID_PAST = np.linspace(0.0, 1.0, 21)
_GRID_AHEAD = 1.0 + np.logspace(-3.0, 6.0, 91)
CROSSING_GRID = np.concatenate([_GRID_PAST, _GRID_AHEAD])
_BISECTIONS = 32


def _moments(fits: LawFits, j: int, hours: np.ndarray, rows=slice(None)):
    """Mean and standard deviation of member j's fitted line at hours (shape (G,) or (G, K), G the groups picked
    by `rows`), its own space."""
    hours = np.asarray(hours, dtype=float)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    m = MEMBERS[j]
    x = member_x(m, hours, fits.hours_scale[rows][expand], fits.hours_offset[rows][expand])
    a, b = fits.a[rows, j][expand], fits.b[rows, j][expand]
    with np.errstate(invalid="ignore", over="ignore"):  # an unfitted group's NaN stays NaN (it has no weight)
        var = (fits.var_a[rows, j][expand] + 2.0 * x * fits.cov_ab[rows, j][expand]
               + x * x * fits.var_b[rows, j][expand])
        return a + b * x, np.sqrt(np.maximum(var, 0.0))


_KIND = np.array([("power", "run_in").index(m.law) + 1 if m.law in ("power", "run_in") else 0 for m in MEMBERS])
_LOG = np.array([m.log_space for m in MEMBERS])
_POWER = np.array([m.power for m in MEMBERS])
_TAU = np.array([m.tau for m in MEMBERS])
_SHARE = np.array([m.share for m in MEMBERS])


def _weighed_pairs(fits: LawFits, confidence: float) -> dict:
    """Every (group, member) pair with some weight, as flat arrays (groups in order): the mixture is then
    evaluated for all of them at once, however many members the laws have (most weigh in for few pumps)."""
    rows, cols = np.nonzero(fits.weight > 0)
    pairs = {name: getattr(fits, name)[rows, cols] for name in ("weight", "a", "b", "var_a", "cov_ab", "var_b")}
    pairs.update(rows=rows, ratio=fits.t_ratio(confidence)[rows, cols], log=_LOG[cols], kind=_KIND[cols],
                 power=_POWER[cols], tau=_TAU[cols], share=_SHARE[cols], scale=fits.hours_scale[rows],
                 offset=fits.hours_offset[rows])
    pairs["starts"] = np.flatnonzero(np.r_[True, rows[1:] != rows[:-1]]) if rows.size else rows
    return pairs


def _pairs_moments(pairs: dict, hours: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each weighed pair's line at its hours (picked per pair): mean, standard deviation, and whether the line
    is of ln q. A search over the value at fixed hours (value_quantile) takes them once for all its steps."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return _moments_at(pairs, hours)


def _moments_at(pairs: dict, hours: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """_pairs_moments without its error state (the caller's): a search takes one step after another, and each
    step's fixed cost is most of a step for one pump's few pairs. A law no pair is of is not evaluated (its
    assignment would move nothing)."""
    col = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    x = hours.copy()
    u = np.maximum((hours + pairs["offset"][col]) / pairs["scale"][col], 0.0)
    kind = pairs["kind"]
    power, run_in = kind == 1, kind == 2
    if power.any():
        x[power] = u[power] ** pairs["power"][power][col]
    if run_in.any():
        x[run_in] = run_in_x(u[run_in], pairs["tau"][run_in][col], pairs["share"][run_in][col])
    mean = pairs["a"][col] + pairs["b"][col] * x
    var = pairs["var_a"][col] + 2.0 * x * pairs["cov_ab"][col] + x * x * pairs["var_b"][col]
    sd = np.sqrt(np.maximum(var, 0.0))
    return mean, sd, np.broadcast_to(pairs["log"][col], hours.shape)


def _cdf_at(pairs: dict, moments: tuple, value: np.ndarray) -> np.ndarray:
    """P(member's line at its hours <= value) for every weighed pair, from the pairs' moments there
    (_moments_at), without an error state of its own (the caller's). Where no pair is of ln q, the level is the
    value and no pair is held above zero flow; P is 0.5 where the standard normal's CDF is NaN (it is never
    infinite)."""
    mean, sd, log = moments
    col = (slice(None), None) if mean.ndim == 2 else (slice(None),)
    any_log = pairs["log"].any()
    level = np.where(log, np.log(np.where(value > 0, value, np.nan)), value) if any_log else value
    t = (level - mean) / sd
    t = np.where(sd > 0, t, np.where(level >= mean, np.inf, -np.inf))
    if any_log:
        t = np.where(log & ~(value > 0), -np.inf, t)  # a log member never goes below zero flow
    p = special.ndtr(t * pairs["ratio"][col])
    return np.where(np.isnan(p), 0.5, p)


def value_cdf(fits: LawFits, hours, value, confidence: float, pairs: dict | None = None) -> np.ndarray:
    """P(averaged trend at `hours` <= `value`), per group (broadcast over a (G, K) grid of hours). pairs: the
    weighed pairs of `fits` at `confidence` when already gathered (a search calls this many times)."""
    pairs = _weighed_pairs(fits, confidence) if pairs is None else pairs
    hours = np.asarray(hours, dtype=float)
    value = np.broadcast_to(np.asarray(value, dtype=float), hours.shape)
    return _mixture_cdf(pairs, hours, value)


def _mixture_cdf(pairs: dict, hours: np.ndarray, value: np.ndarray, moments: tuple | None = None) -> np.ndarray:
    """value_cdf on gathered pairs: per group (rows of hours and value), the weighed sum of its pairs' P. A group's
    sum depends on its own pairs alone (one reduce over its segment), so the pairs of some groups only
    (_pairs_of) give those groups the same figures to the last bit. moments: the pairs' at these hours
    (_pairs_moments), when the caller has them."""
    total = np.zeros(hours.shape)
    rows = pairs["rows"]
    if rows.size:
        col = (slice(None), None) if hours.ndim == 2 else (slice(None),)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):  # once for the step
            p = _cdf_at(pairs, _moments_at(pairs, hours[rows]) if moments is None else moments, value[rows])
        total[rows[pairs["starts"]]] = np.add.reduceat(pairs["weight"][col] * p, pairs["starts"], axis=0)
    return total


def _fixed_value_step(pairs: dict, value: np.ndarray):
    """_mixture_cdf(pairs, hours, value) as a function of the hours alone, for a search that moves only the hours
    at a fixed value (the crossing's halvings): hours and value of shape (items, 1), each item with pairs of its
    own, in order (_pairs_of_items). What does not move with the hours (the pairs' columns, the level of each
    pair, which pairs are of which law) is taken once, and each step is the same arithmetic as _mixture_cdf's,
    to the last bit (tests/test_model_average_steps.py), at a fraction of its fixed cost: for one pump a step's
    numpy calls on a few dozen values are most of it. Call it within an error state that ignores invalid,
    divide and over."""
    rows, starts = pairs["rows"], pairs["starts"]
    column = {name: pairs[name][:, None] for name in ("offset", "scale", "a", "b", "var_a", "cov_ab", "var_b",
                                                      "ratio", "weight")}
    offset, scale, a, b = column["offset"], column["scale"], column["a"], column["b"]
    var_a, cov_ab, var_b, ratio, weight = (column[name] for name in ("var_a", "cov_ab", "var_b", "ratio", "weight"))
    power = np.flatnonzero(pairs["kind"] == 1)
    exponent = pairs["power"][power][:, None]
    run_in = np.flatnonzero(pairs["kind"] == 2)
    tau, share = pairs["tau"][run_in][:, None], pairs["share"][run_in][:, None]
    value = value[rows]
    log = pairs["log"][:, None]
    any_log = bool(pairs["log"].any())
    level = np.where(log, np.log(np.where(value > 0, value, np.nan)), value) if any_log else value
    below_zero = log & ~(value > 0) if any_log else None  # a log member never goes below zero flow

    def mixture(hours: np.ndarray) -> np.ndarray:
        h = hours[rows]
        x = h.copy()
        u = np.maximum((h + offset) / scale, 0.0)
        if power.size:
            x[power] = u[power] ** exponent
        if run_in.size:
            x[run_in] = run_in_x(u[run_in], tau, share)
        mean = a + b * x
        sd = np.sqrt(np.maximum(var_a + 2.0 * x * cov_ab + x * x * var_b, 0.0))
        t = (level - mean) / sd
        t = np.where(sd > 0, t, np.where(level >= mean, np.inf, -np.inf))
        if below_zero is not None:
            t = np.where(below_zero, -np.inf, t)
        p = special.ndtr(t * ratio)
        return np.add.reduceat(weight * np.where(np.isnan(p), 0.5, p), starts, axis=0)

    return mixture


def _fixed_hours_step(pairs: dict, moments: tuple, shape: tuple):
    """_mixture_cdf(pairs, hours, value, moments) as a function of the value alone, for a search that moves only
    the value at fixed hours (a value quantile): the pairs' moments there (_pairs_moments) and what else does not
    move taken once, each step the same arithmetic as _cdf_at's and _mixture_cdf's, to the last bit
    (tests/test_model_average_steps.py). shape: the hours' (groups, or groups and points). Call it within an
    error state that ignores invalid, divide and over."""
    rows, starts = pairs["rows"], pairs["starts"]
    col = (slice(None), None) if len(shape) == 2 else (slice(None),)
    mean, sd, log = moments
    spread = sd > 0
    ratio, weight = pairs["ratio"][col], pairs["weight"][col]
    any_log = bool(pairs["log"].any())
    at = rows[starts]

    def mixture(value: np.ndarray) -> np.ndarray:
        total = np.zeros(shape)
        v = value[rows]
        level = np.where(log, np.log(np.where(v > 0, v, np.nan)), v) if any_log else v
        t = np.where(spread, (level - mean) / sd, np.where(level >= mean, np.inf, -np.inf))
        if any_log:
            t = np.where(log & ~(v > 0), -np.inf, t)  # a log member never goes below zero flow
        p = special.ndtr(t * ratio)
        total[at] = np.add.reduceat(weight * np.where(np.isnan(p), 0.5, p), starts, axis=0)
        return total

    return mixture


def _pairs_of(pairs: dict, groups: np.ndarray) -> dict:
    """The weighed pairs of the groups picked (a mask over groups), each group renumbered to its place among
    them: the mixture of those groups alone."""
    keep = groups[pairs["rows"]]
    place = np.cumsum(groups) - 1
    picked = {name: values[keep] for name, values in pairs.items() if name != "starts"}
    picked["rows"] = place[picked["rows"]]
    rows = picked["rows"]
    picked["starts"] = np.flatnonzero(np.r_[True, rows[1:] != rows[:-1]]) if rows.size else rows
    return picked


def value_quantile(fits: LawFits, hours, level: float, confidence: float) -> np.ndarray:
    """The `level` quantile of the averaged trend's value (a flow, L/min) at `hours`; NaN for unfitted groups."""
    hours = np.asarray(hours, dtype=float)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    lo = np.full(hours.shape, np.inf)
    hi = np.full(hours.shape, -np.inf)
    for j in np.flatnonzero((fits.weight > 0).any(axis=0)):  # a member without weight widens no bracket
        m = MEMBERS[j]
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
    pairs = _weighed_pairs(fits, confidence)
    # The pairs' lines at these hours, once: each step moves only the value (value_cdf's arithmetic otherwise).
    if pairs["rows"].size:
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):  # once for the search
            mixture = _fixed_hours_step(pairs, _pairs_moments(pairs, hours[pairs["rows"]]), hours.shape)
            for _ in range(44):  # the bracket shrinks to 1e-13 of its width
                mid = 0.5 * (lo + hi)
                below = mixture(mid) < level
                lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    else:  # no group is fitted: every P is 0
        for _ in range(44):
            mid = 0.5 * (lo + hi)
            below = 0.0 < level
            lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    return np.where(fitted, 0.5 * (lo + hi), np.nan)


def averaged_slope(fits: LawFits, hours) -> np.ndarray:
    """Model-weighted mean of the members' growth rates dq/dh (L/min per hour) at `hours` (per group)."""
    h = np.asarray(hours, dtype=float)
    total = np.zeros(len(fits))
    for j in np.flatnonzero((fits.weight > 0).any(axis=0)):  # a member without weight adds nothing
        m = MEMBERS[j]
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


# Columns of CROSSING_GRID evaluated at once: a group whose every level is reached is not evaluated further out.
_GRID_STEP = 14


def crossing_quantiles(fits: LawFits, limit, now_hours, levels, confidence: float) -> list[np.ndarray]:
    """Interval hours at which P(averaged trend >= limit) first reaches each of `levels`, per group.

    limit: a flow (L/min) per group; now_hours: the interval's current hours (sets the search grid). A level
    the mixture never reaches within a million times the current hours gives NaN (open); one already reached
    at the interval start gives 0.

    The first point of the grid (CROSSING_GRID times the current hours) where each level is reached brackets the
    crossing with the point before it, and _BISECTIONS halvings of that bracket find it (_crossing_search, which
    crossing_bands also runs for many laws and limits at once). Every P is the one the whole grid would give
    (_mixture_cdf), so the crossings are those of evaluating every group everywhere, to the last bit
    (tests/test_trend_wear_laws.py keeps that search as the reference).
    """
    limit = np.asarray(limit, dtype=float)
    now = np.asarray(now_hours, dtype=float)
    levels = np.asarray(levels, dtype=float)
    n = len(now)
    ok = _searchable(fits, limit, now)
    out = np.full((n, len(levels)), np.nan)
    if not ok.any():
        return list(out.T)
    group = np.repeat(np.flatnonzero(ok), len(levels))
    level = np.tile(levels, int(ok.sum()))
    out[ok] = _crossing_search(_weighed_pairs(fits, confidence), n, limit, now, group, level).reshape(-1, len(levels))
    return list(out.T)


def _searchable(fits: LawFits, limit: np.ndarray, now: np.ndarray) -> np.ndarray:
    """The groups a crossing is searched for: a limit, current hours and some weight."""
    return np.isfinite(limit) & (limit > 0) & np.isfinite(now) & (now > 0) & (fits.weight.sum(axis=1) > 0)


def _crossing_search(pairs: dict, n: int, limit: np.ndarray, now: np.ndarray, group: np.ndarray,
                     level: np.ndarray) -> np.ndarray:
    """The crossing hours of every item of a search: an item is a group (of `n`, each with its weighed pairs, a
    limit and current hours; groups in ascending order) and a level of P(crossed). Items of one group share its
    walk out along the grid; each item is then halved alone, so an item's figure is the same whatever others
    the search holds, to the last bit (each step is elementwise per group, and a group's sum over its pairs one
    reduce over its own segment).

    The grid is walked out a block of columns at a time, each block only for the groups with an item not yet
    reached; the halvings are only for the items reached past the grid's first point (one reached there is 0,
    one never reached NaN).
    """
    first = np.full(len(group), -1)  # the first grid column where the item's level is reached (-1: not yet)
    open_ = np.zeros(n, dtype=bool)
    open_[group] = True
    for start in range(0, len(CROSSING_GRID), _GRID_STEP):
        if not open_.any():
            break
        picked = _pairs_of(pairs, open_)
        grid = now[open_, None] * CROSSING_GRID[None, start:start + _GRID_STEP]
        crossed = 1.0 - _mixture_cdf(picked, grid, np.broadcast_to(limit[open_, None], grid.shape))
        place = np.cumsum(open_) - 1
        items = np.flatnonzero(open_[group] & (first < 0))
        reached = crossed[place[group[items]]] >= level[items, None]
        found = reached.any(axis=1)
        first[items[found]] = start + np.argmax(reached[found], axis=1)
        open_[:] = False
        open_[group[first < 0]] = True
    out = np.where(first == 0, 0.0, np.nan)
    halved = np.flatnonzero(first > 0)
    if halved.size:
        picked = _pairs_of_items(pairs, n, group[halved])
        f = first[halved]
        span = now[group[halved], None]
        hi = span * CROSSING_GRID[f][:, None]
        lo = span * CROSSING_GRID[f - 1][:, None]
        level_s = level[halved, None]
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):  # once for the halvings
            mixture = _fixed_value_step(picked, limit[group[halved], None])
            for _ in range(_BISECTIONS):
                mid = 0.5 * (lo + hi)
                up = 1.0 - mixture(mid) >= level_s
                lo, hi = np.where(up, lo, mid), np.where(up, mid, hi)
        out[halved] = hi[:, 0]
    return out


def _pairs_of_items(pairs: dict, n: int, groups: np.ndarray) -> dict:
    """The weighed pairs of each of `groups` (group numbers, ascending, a group more than once where it has
    several items), the i-th item's pairs numbered i: the mixture per item."""
    count = np.bincount(pairs["rows"], minlength=n)
    seg = np.cumsum(count) - count  # each group's first pair
    per = count[groups]
    ends = np.cumsum(per)
    take = np.repeat(seg[groups] - (ends - per), per) + np.arange(ends[-1] if per.size else 0)
    picked = {name: values[take] for name, values in pairs.items() if name not in ("starts", "rows")}
    picked["rows"] = np.repeat(np.arange(len(groups)), per)
    picked["starts"] = ends - per
    return picked


def law_alone(fits: LawFits, law: str, rows: np.ndarray | None = None) -> LawFits:
    """The fits with the weight of one law's members only, renormalised (per group; a group where the law has
    no weight, or not among `rows`, is left unfitted): that law's own forecast, its exponents still averaged."""
    of_law = np.array([m.law == law for m in MEMBERS])
    weight = np.where(of_law[None, :], fits.weight, 0.0)
    total = weight.sum(axis=1, keepdims=True)
    keep = total > 0 if rows is None else (total > 0) & rows[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        weight = np.where(keep, weight / np.where(total > 0, total, 1.0), 0.0)
    return dataclasses.replace(fits, weight=weight, _t_ratio=fits._t_ratio)


def heaviest_law(fits: LawFits) -> np.ndarray:
    """Per group, the index in LAWS of the law with the most weight (of fits.centred(): the pages' and the JSON's
    wear_law)."""
    weights = fits.law_weights()
    return np.argmax(np.column_stack([weights[law] for law in LAWS]), axis=1)


def heaviest_law_median(fits: LawFits, hours, confidence: float) -> np.ndarray:
    """The heaviest law's median value (a flow, L/min) at `hours` (per group, or a (G, K) grid): the centre
    line of value_band, and so the trend's value now that the pages show beside the forecast.

    One search for every group, each group weighing its heaviest law's members alone (as law_alone does for
    one law, row by row): a group's figures are those of a search for its law alone, to the last bit, as a
    search's groups do not mix."""
    hours = np.asarray(hours, dtype=float)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    centred = fits.centred()
    heaviest = heaviest_law(centred)
    rows = fits.weight.sum(axis=1) > 0
    if not rows.any():
        return np.full(hours.shape, np.nan)
    weight = np.where(_OF_LAW[heaviest], centred.weight, 0.0)
    total = weight.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        weight = np.where((total > 0) & rows[:, None], weight / np.where(total > 0, total, 1.0), 0.0)
    alone = dataclasses.replace(centred, weight=weight, _t_ratio=centred._t_ratio)
    return np.where(rows[expand], value_quantile(alone, hours, 0.5, confidence), np.nan)


# Per law (rows, as LAWS) the members of that law (columns, as MEMBERS).
_OF_LAW = np.array([[m.law == law for m in MEMBERS] for law in LAWS])


def plausible_laws(fits: LawFits, forecast_law: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Per law, the groups whose readings cannot rule it out: its weight at least CONFIDENCE_SET_RATIO of the
    heaviest law's (and above zero); and the law the forecast follows (forecast_law, an index in LAWS per
    group, where its weights differ: LawFits.centre_weight), so that the band holds its law's band too."""
    weights = fits.law_weights()
    top = np.max(np.column_stack([weights[law] for law in LAWS]), axis=1)
    fitted = fits.weight.sum(axis=1) > 0
    return {law: ((weights[law] > 0) & (weights[law] >= CONFIDENCE_SET_RATIO * top))
            | (fitted & (forecast_law == k) if forecast_law is not None else False) for k, law in enumerate(LAWS)}


def crossing_band(fits: LawFits, limit, now_hours, confidence: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Low bound, forecast and high bound of the interval hours at which the trend reaches `limit`, per group.

    The forecast is the median crossing of the heaviest law alone (heaviest_law; its exponents or run-in shapes
    still averaged), on the lines the forecast follows (LawFits.centred; the band on the trend's own lines,
    widened to hold the forecast). The median of the mixture of all laws was tried first: where one law takes
    most of the weight, the others' share drags the forecast towards theirs, and on the invented fleets of
    benchmarks/calibration.py the law the readings favour gave the smaller median error for exponential wear
    (11.4 % against 13.2 %) and as good or better for linear and accelerating wear, run-in wear 0.4 to 1.2
    points worse. The bounds are the union of the bands of the plausible laws (plausible_laws), each law's band
    the (1 - confidence) / 2 and (1 + confidence) / 2 crossing quantiles of that law alone: the mixture's tail
    quantiles shrink a law holding a fifth of the weight to its central part, so where the readings cannot
    tell an accelerating law from a steady one the mixture's band held the truth for only 80 % of accelerating
    pumps there; the union holds it for 85 % or more of every law. The forecast lies inside the band (the
    heaviest law is plausible). The high bound is open (NaN) when any plausible law's is; the low bound is NaN
    only when no plausible law reaches the limit's low quantile.
    """
    return crossing_bands([(fits, limit, now_hours)], confidence)[0]


def crossing_bands(cases, confidence: float) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """crossing_band of each case (fits, limit, now_hours), every law's crossings of every case found in one
    search (_crossing_search): for one pump the search's steps cost about as much whatever they hold, so one
    search for the slip's and the case drain's laws together costs about what one law's alone did."""
    alpha = 1.0 - confidence
    searches = []  # per case and plausible law: (case, its rows, the forecast's rows, its blocks)
    blocks = []  # the searched fits with their levels and the groups each level is wanted for
    for c, (fits, _, _) in enumerate(cases):
        centred = fits.centred()
        heaviest = heaviest_law(centred)
        for k, (law, rows) in enumerate(plausible_laws(fits, heaviest).items()):
            if not rows.any():
                continue
            top = rows & (heaviest == k)
            band = len(blocks)
            if centred is fits:  # one walk for the three levels (the median wanted for the forecast's law only)
                blocks.append((c, law_alone(fits, law, rows), (alpha / 2, 0.5, 1 - alpha / 2), (rows, top, rows)))
                searches.append((c, rows, top, band, None))
                continue
            # the bounds on the trend's own lines, the forecast on the centred ones (the heaviest law only)
            blocks.append((c, law_alone(fits, law, rows), (alpha / 2, 1 - alpha / 2), (rows, rows)))
            median = None
            if top.any():
                median = len(blocks)
                blocks.append((c, law_alone(centred, law, top), (0.5,), (top,)))
            searches.append((c, rows, top, band, median))
    found = _block_crossings(cases, blocks, confidence)
    out = []
    for c, (fits, _, _) in enumerate(cases):
        n = len(fits)
        median = np.full(n, np.nan)
        low = np.full(n, np.nan)
        high = np.full(n, -np.inf)
        open_high = np.zeros(n, dtype=bool)
        for case, rows, top, band, med in searches:
            if case != c:
                continue
            if med is None and len(found[band]) == 3:
                lo, mid, hi = found[band]
            else:
                (lo, hi), mid = found[band], (found[med][0] if med is not None else np.full(n, np.nan))
            median = np.where(top, mid, median)
            low = np.where(rows, np.fmin(low, lo), low)
            open_high |= rows & np.isnan(hi)
            high = np.where(rows, np.fmax(high, hi), high)
        low = np.fmin(low, median)  # a forecast on a centred line may lie past its own trend's band: it holds it
        high = np.where(np.isfinite(high), np.fmax(high, median), high)
        reached = np.isfinite(median) | np.isfinite(low)
        high = np.where(open_high | ~np.isfinite(high) | ~reached, np.nan, high)
        out.append((low, median, high))
    return out


def _block_crossings(cases, blocks, confidence: float) -> list[list[np.ndarray]]:
    """Per block (case, fits, levels, the groups each level is wanted for): crossing_quantiles' figures for the
    groups wanted (NaN elsewhere), every block's groups stacked as the groups of one search."""
    if not blocks:  # no plausible law in any case (no fitted interval, or an empty fleet)
        return []
    pairs, limits, nows, groups, levels, places = [], [], [], [], [], []
    offset = 0
    for c, fits, block_levels, wanted in blocks:
        _, limit, now_hours = cases[c]
        limit, now = np.asarray(limit, dtype=float), np.asarray(now_hours, dtype=float)
        ok = _searchable(fits, limit, now)
        block_pairs = _weighed_pairs(fits, confidence)
        block_pairs["rows"] = block_pairs["rows"] + offset
        pairs.append(block_pairs)
        limits.append(limit)
        nows.append(now)
        want = np.column_stack([ok & w for w in wanted])  # (groups, levels)
        g, j = np.nonzero(want)  # row-major: each group's levels together, groups in order
        groups.append(g + offset)
        levels.append(np.asarray(block_levels, dtype=float)[j])
        places.append((g, j))
        offset += len(now)
    stacked = {name: np.concatenate([p[name] for p in pairs]) for name in pairs[0] if name != "starts"}
    rows = stacked["rows"]
    stacked["starts"] = np.flatnonzero(np.r_[True, rows[1:] != rows[:-1]]) if rows.size else rows
    group, level = np.concatenate(groups), np.concatenate(levels)
    found = _crossing_search(stacked, offset, np.concatenate(limits), np.concatenate(nows), group, level) \
        if group.size else np.empty(0)
    out, at = [], 0
    for (_, fits, block_levels, _), (g, j) in zip(blocks, places, strict=True):
        table = np.full((len(fits), len(block_levels)), np.nan)
        table[g, j] = found[at:at + len(g)]
        at += len(g)
        out.append(list(table.T))
    return out


def value_band(fits: LawFits, hours, confidence: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Low edge, centre and high edge of the trend's value (a flow, L/min) at `hours` (per group, broadcast
    over a (G, K) grid), as crossing_band: the centre the heaviest law's median, the edges the union of the
    plausible laws' own bands. The centre meets a limit at crossing_band's forecast, the edges at its bounds."""
    hours = np.asarray(hours, dtype=float)
    alpha = 1.0 - confidence
    centred = fits.centred()
    heaviest = heaviest_law(centred)
    median = np.full(hours.shape, np.nan)
    low = np.full(hours.shape, np.nan)
    high = np.full(hours.shape, np.nan)
    expand = (slice(None), None) if hours.ndim == 2 else (slice(None),)
    grid = hours if hours.ndim == 2 else hours[:, None]
    levels = np.repeat([alpha / 2, 0.5, 1 - alpha / 2], grid.shape[1])[None, :]  # three quantiles, one search
    edge_levels = np.repeat([alpha / 2, 1 - alpha / 2], grid.shape[1])[None, :]
    for k, (law, rows) in enumerate(plausible_laws(fits, heaviest).items()):
        if not rows.any():
            continue
        top = rows & (heaviest == k)
        if centred is fits:  # one search for the three levels
            found = value_quantile(law_alone(fits, law, rows), np.tile(grid, 3), levels, confidence)
            lo, mid, hi = (part.reshape(hours.shape) for part in np.split(found, 3, axis=1))
        else:  # the edges on the trend's own lines, the centre on the centred ones (the heaviest law only)
            found = value_quantile(law_alone(fits, law, rows), np.tile(grid, 2), edge_levels, confidence)
            lo, hi = (part.reshape(hours.shape) for part in np.split(found, 2, axis=1))
            mid = np.full(hours.shape, np.nan)
            if top.any():
                mid = value_quantile(law_alone(centred, law, top), grid, 0.5, confidence).reshape(hours.shape)
        median = np.where(top[expand], mid, median)
        low = np.where(rows[expand], np.fmin(low, lo), low)
        high = np.where(rows[expand], np.fmax(high, hi), high)
    return np.fmin(low, median), median, np.fmax(high, median)
