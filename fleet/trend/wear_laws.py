"""Wear laws: the shapes leakage growth may take within a service interval, fitted for every interval at once
and weighed against each other by small-sample AIC (AICc).

- exponential: ln q = a + b h. Leakage grows with the cube of the gap, so wear that opens the gap in
  proportion to itself grows it exponentially; the physics default.
- linear: q = a + b h. Steady abrasive wear (dirty oil) opens the gap at a constant rate.
- power: q = a + b ((h + h0) / H)^p, H = h0 + the interval's latest hours, h0 the hours the pump had run
  before the interval's hours begin to count (0 after an overhaul; for the first interval the hour meter at
  the first reading, the meter counting from new). p > 1 accelerates (a damaged part), p < 1
  decelerates (run-in after an overhaul). p is not solved for: each exponent of a fixed grid is a member of
  its own, a straight line in (h / H)^p, so the spread over p carries the exponent's uncertainty into the
  forecast and every member is fitted by the same grouped robust line fit.
- run_in: q = a + b x, x = s (1 - e^(-u/tau)) / (1 - e^(-1/tau)) + (1 - s) u, u = (h + h0) / H as for the
  power law: a fast rise after an overhaul (or from new) that settles into steady wear, s the share of the rise
  to the latest reading that the run-in part makes, tau its time constant (a share of H). Like the power law's
  exponent, tau and s are not solved for: each pair of a small grid is a member, a straight line in its own x
  (x runs from 0 to 1 over the readings). A member is only fitted where the interval holds the early part that
  identifies it: the first reading within 3 tau of the start, and at least two readings there.

q is a referred flow (slip or case drain, L/min) and h the running hours in the interval. Weights: each law's
fit is scored on the same data scale (q, residuals divided by the error model's sigma, Huber-clipped at a
common robust scale so one outlier does not decide the law), AICc = n ln(D / n) + 2K + 2K(K + 1) / (n - K - 1)
with K counting the scale too (Burnham & Anderson 2002, sec. 2.4), weights exp(-delta / 2) normalised. Within
the power law its exponents, and within the run-in law its (tau, s) pairs, are weighed by their likelihood
alone (same K). A law needs n > K + 1 readings
to be scored; with fewer than that for every law, the exponential law stands alone.

Where an interval has a case drain trend, the slip's forecast follows the drain's shape scaled to the slip's
level (LawFits.centred_on: the same clearances, and the drain meter sees the shape far more sharply), unless the
slip's own readings refute that shape; the slip's band stays its own.
"""

import dataclasses
import warnings
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import pandas as pd
from scipy import special, stats

from fleet.trend.grouped import group_max, group_min
from fleet.trend.linear import t_quantile
from fleet.trend.robust import fit_reweighted, huber_weights, robust_scale
from fleet.trend.settings import AnalysisSettings

LAWS = ("exponential", "linear", "power", "run_in")
# a, b, scale (+ the exponent p; + the run-in's tau and share s)
LAW_PARAMS = {"exponential": 3, "linear": 3, "power": 4, "run_in": 5}
# 0.35 .. 4 in even steps on a log scale; p = 1 is the linear law itself.
POWER_EXPONENTS = tuple(2.0 ** (k / 4.0) for k in (*range(-6, 0), *range(1, 9)))
# Run-in time constants (shares of H, 0.04 .. 0.4 in even steps on a log scale) and shares of the rise it makes
# (s = 0 would be the linear law). Our choices, measured on the invented fleets of benchmarks/calibration.py:
# shares in steps of 0.1 forecast run-in wear better than steps of 0.15 (median error 26.7 % against 27.4 %),
# time constants from 0.03 to 0.65 no better than these.
RUN_IN_TAUS = tuple(0.04 * 10.0 ** (k / 6.0) for k in range(7))
RUN_IN_SHARES = (0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9)
RUN_IN_REACH = 3.0  # a run-in member needs readings within this many tau of the start


@dataclass(frozen=True)
class Member:
    """One fitted line of the model set: a law, and for the power law one exponent."""

    name: str
    law: str
    log_space: bool  # the line is fitted to ln q (else to q)
    power: float  # the line's x is (h / H)^power for the power law; plain hours otherwise
    n_params: int
    tau: float = float("nan")  # run-in law: time constant, a share of H
    share: float = float("nan")  # run-in law: the share of the rise to H that the run-in part makes


MEMBERS = (
    Member("exponential", "exponential", True, 1.0, 2),
    Member("linear", "linear", False, 1.0, 2),
    *(Member(f"power_p{round(100 * p):03d}", "power", False, p, 3) for p in POWER_EXPONENTS),
    *(Member(f"run_in_t{round(1000 * t):03d}_s{round(100 * sh):02d}", "run_in", False, 1.0, 4, t, sh)
      for t in RUN_IN_TAUS for sh in RUN_IN_SHARES),
)
# The members' properties as arrays, for work over many (group, member) pairs at once.
_MEMBER_KIND = np.array([("power", "run_in").index(m.law) + 1 if m.law in ("power", "run_in") else 0 for m in MEMBERS])
_MEMBER_LOG = np.array([m.log_space for m in MEMBERS])
_MEMBER_POWER = np.array([m.power for m in MEMBERS])
_MEMBER_TAU = np.array([m.tau for m in MEMBERS])
_MEMBER_SHARE = np.array([m.share for m in MEMBERS])
_FAMILY_POWERS = np.array([m.power for m in MEMBERS if m.law == "power"])
_RUN_IN_TAUS = np.array(RUN_IN_TAUS)
_RUN_IN_SHARES = np.array(RUN_IN_SHARES)
_RUN_IN_SCALE = -np.expm1(-1.0 / _RUN_IN_TAUS)  # 1 - e^(-1/tau): a run-in member's rise at u = 1
# ... per run-in member (time constant by time constant, each with every share), as _family_x's columns
_RUN_IN_SHARE_COLUMNS = np.tile(_RUN_IN_SHARES, _RUN_IN_TAUS.size)
_RUN_IN_SCALE_COLUMNS = np.repeat(_RUN_IN_SCALE, _RUN_IN_SHARES.size)
_RUN_IN_STEADY_COLUMNS = np.tile(1.0 - _RUN_IN_SHARES, _RUN_IN_TAUS.size)
# _family_x lays the run-in members out time constant by time constant, as MEMBERS holds them
assert [(m.tau, m.share) for m in MEMBERS if m.law == "run_in"] == [
    (t, sh) for t in RUN_IN_TAUS for sh in RUN_IN_SHARES]
FAMILIES = ("power", "run_in")  # laws with many members, fitted in one weighted pass each
# Each law's members as a mask over MEMBERS, made once (a list over the members per call costs more than the
# arithmetic on one pump's few rows); read-only, shared by every call.
OF_LAW = {law: np.array([m.law == law for m in MEMBERS]) for law in LAWS}
for _mask in OF_LAW.values():
    _mask.setflags(write=False)
_RUN_IN_TAU_OF_MEMBER = np.array([m.tau if m.law == "run_in" else np.nan for m in MEMBERS])
_N_PARAMS = np.array([m.n_params for m in MEMBERS], dtype=float)


def _columns_of(law: str) -> slice:
    cols = np.flatnonzero(OF_LAW[law])
    assert np.array_equal(cols, np.arange(cols[0], cols[-1] + 1))  # a family's members stand together
    return slice(int(cols[0]), int(cols[-1]) + 1)


_FAMILY_COLUMNS = {family: _columns_of(family) for family in FAMILIES}
FIELDS = ("a", "b", "var_a", "var_b", "cov_ab", "dof", "weight")
CENTRE_FIELDS = ("centre_a", "centre_b")  # LawFits.centred_on


@dataclass
class LawFits:
    """Per group (rows) and member (columns of MEMBERS) the line parameters and the model weight."""

    a: np.ndarray
    b: np.ndarray
    var_a: np.ndarray
    var_b: np.ndarray
    cov_ab: np.ndarray
    dof: np.ndarray
    weight: np.ndarray  # sums to 1 over the members of a fitted group; 0 where a member is not usable
    hours_scale: np.ndarray  # H of the power law, per group
    hours_offset: np.ndarray  # h0 of the power law, per group
    scale: np.ndarray | None = None  # robust residual scale per group and member (kept in memory only)
    n_points: np.ndarray | None = None  # readings fitted per group
    law_score: np.ndarray | None = None  # AICc per group and law (columns as LAWS), NaN where not scored
    member_score: np.ndarray | None = None  # n ln(D / n) per group and member, NaN where not scored
    usable: np.ndarray | None = None  # per group and member: the line could be fitted
    allowed: tuple = LAWS  # the laws compared (AnalysisSettings.wear_laws)
    # The lines the forecast follows (centred_on): where set, per group and member a and b of the line whose
    # median is the forecast and the chart's centre; None: (a, b) themselves. The band stays on (a, b).
    centre_a: np.ndarray | None = None
    centre_b: np.ndarray | None = None
    # The member weights the forecast follows where they differ from `weight` (fleet.trend.shape_prior: the
    # shapes pooled over the pump kind); the band keeps `weight`.
    centre_weight: np.ndarray | None = None
    _t_ratio: dict = field(default_factory=dict, repr=False)

    def t_ratio(self, confidence: float) -> np.ndarray:
        """z / t per group and member at the two-sided level: Phi(T z / t) then has the member's t quantiles
        there (computed once; t quantiles are slow: one per distinct dof, the counts of readings being few)."""
        if confidence not in self._t_ratio:
            distinct, at = np.unique(self.dof, return_inverse=True)
            t = t_quantile(confidence, distinct)[at.reshape(self.dof.shape)]
            self._t_ratio[confidence] = special.ndtri(0.5 + confidence / 2.0) / t
        return self._t_ratio[confidence]

    def weigh(self, law_score: np.ndarray, member_score: np.ndarray, log_prior: np.ndarray | None = None) -> None:
        """Set the member weights from scores per group: AICc per law, and the fit term n ln(D / n) per member
        of a law with many members (same K, so the likelihood alone weighs them); this trend's own, or summed
        with another's. Where no law could be scored the first allowed law stands alone. log_prior: per group
        and member the log prior within its family (None: flat), so a member's weight within its family is
        prior x likelihood (Bayes' rule; fleet.trend.shape_prior)."""
        law_w = akaike_weights(law_score, fallback=LAWS.index(self.allowed[0]))
        weight = np.zeros(self.a.shape)
        for k, law in enumerate(LAWS):
            of_law = OF_LAW[law]
            score = member_score[:, of_law] - (0.0 if log_prior is None else 2.0 * log_prior[:, of_law])
            within = akaike_weights(score) if law in FAMILIES else 1.0
            weight[:, of_law] = law_w[:, k:k + 1] * within
        weight = np.where(self.usable, weight, 0.0)
        # A member with under a millionth of the heaviest one's weight moves no forecast (all of them together
        # hold under 1e-4 of the probability); dropping them spares the forecasts their evaluation.
        weight = np.where(weight >= 1e-6 * weight.max(axis=1, keepdims=True, initial=0.0), weight, 0.0)
        total = weight.sum(axis=1, keepdims=True)
        fitted = self.usable.any(axis=1, keepdims=True) & (total > 0)  # divided only by a positive total
        self.weight = np.where(fitted, weight / np.where(total > 0, total, 1.0), 0.0)

    def __len__(self) -> int:
        return len(self.hours_scale)

    def law_weights(self) -> dict[str, np.ndarray]:
        return {law: self.weight[:, OF_LAW[law]].sum(axis=1) for law in LAWS}

    def centred(self) -> "LawFits":
        """The fits with each member's line moved to the line the forecast follows (centre_a, centre_b), its
        spread and weight kept: the forecast and the chart's centre come from these, the band from self."""
        if self.centre_a is None and self.centre_weight is None:
            return self
        return dataclasses.replace(
            self, a=self.a if self.centre_a is None else self.centre_a,
            b=self.b if self.centre_b is None else self.centre_b,
            weight=self.weight if self.centre_weight is None else self.centre_weight, _t_ratio=self._t_ratio)

    def centred_on(self, other: "LawFits", group, hours, value, sigma, settings: AnalysisSettings) -> None:
        """Set the lines the forecast follows to the shape of `other` (the case drain's trend of the same
        intervals) scaled to this trend's level.

        Slip and case drain leak through the same clearances: where the share of the slip that leaves through
        the case drain holds over the interval, both grow alike, and the case drain meter (small flows, a few %
        of noise) shows the shape far more sharply than the slip (the difference of two large flows). Per group
        and member, q = k d(x): k by weighted least squares through the origin of this trend's readings on the
        other's fitted line (weights 1 / sigma^2, Huber-weighted about that line); for the exponential law a
        shift of ln q by ln k. Only where the other trend has a trend of its own (settings.min_points readings)
        on the same hours (its H and h0 equal this one's), k > 0, and this trend's readings do not refute the
        shared shape: the F test of the one-parameter line k d(x) against this trend's own two-parameter line
        at the 1 % level (an extra sum of squares test, e.g. Draper & Smith, Applied Regression Analysis, on
        the same Huber weights; cited from memory). Elsewhere the line stays this trend's own. The band is not
        moved: it rests on this trend's own readings, so it holds whether the shares hold or not."""
        n_groups = len(self)
        count = np.bincount(group, minlength=n_groups).astype(float)
        same = (np.isclose(other.hours_scale, self.hours_scale) & np.isclose(other.hours_offset, self.hours_offset)
                & (count >= 4) & (np.nan_to_num(other.n_points) >= settings.min_points))
        refuted_at = stats.f.ppf(0.99, 1, np.maximum(count - 2, 1))
        centre_a, centre_b = self.a.copy(), self.b.copy()
        weight = self.weight if self.centre_weight is None else np.fmax(self.weight, self.centre_weight)
        weighed = (weight > 0) & same[:, None]  # a member without weight moves no forecast
        pair_g, pair_j = np.nonzero(weighed)
        # Every weighed (group, member) pair at once, each with its group's readings (in their own order), in
        # parts of whole pairs that bound memory.
        order = np.argsort(group, kind="stable")
        first = (np.cumsum(count) - count).astype(np.int64)
        rows = count[pair_g].astype(np.int64)
        ends = np.cumsum(rows)
        start = 0
        while start < len(pair_g):
            stop = max(int(np.searchsorted(ends, (ends[start - 1] if start else 0) + _PAIR_ROWS, side="right")),
                       start + 1)
            pg, pj = pair_g[start:stop], pair_j[start:stop]
            a, b, use = _centred_lines(self, other, pg, pj, rows[start:stop], first, order, group, hours, value,
                                       sigma, count, refuted_at, settings.huber_k)
            centre_a[pg[use], pj[use]] = a[use]
            centre_b[pg[use], pj[use]] = b[use]
            start = stop
        self.centre_a, self.centre_b = centre_a, centre_b

    def line_fields(self) -> tuple:
        """The fields kept of each member (member_columns): FIELDS, and the centred lines and weights where set."""
        centre = CENTRE_FIELDS if self.centre_a is not None else ()
        if self.centre_weight is not None:
            centre = (*centre, "centre_weight")
        return (*FIELDS, *centre)

    @classmethod
    def from_columns(cls, frame, prefix: str) -> "LawFits":
        """Back from the columns of member_columns (FleetAnalysis.fits' members' lines); `frame` may be a DataFrame
        (many groups) or one row (a Series or dict)."""

        def col(name):
            return np.atleast_1d(np.asarray(frame[f"{prefix}_{name}"], dtype=float))

        # The lines the forecast follows are kept only for a trend centred on another's (centred_on).
        fields = (*FIELDS, *CENTRE_FIELDS) if f"{prefix}_{MEMBERS[0].name}_centre_a" in frame else FIELDS
        if f"{prefix}_{MEMBERS[0].name}_centre_weight" in frame:
            fields = (*fields, "centre_weight")
        if isinstance(frame, pd.DataFrame):  # every member's columns in one take, not one lookup each
            names = [f"{prefix}_{m.name}_{f}" for f in fields for m in MEMBERS]
            block = frame[names].to_numpy(dtype=float).reshape(len(frame), len(fields), len(MEMBERS))
            parts = {f: block[:, i, :] for i, f in enumerate(fields)}
        else:
            parts = {f: np.column_stack([col(f"{m.name}_{f}") for m in MEMBERS]) for f in fields}
        return cls(
            **parts,
            hours_scale=col("hours_scale"),
            hours_offset=col("hours_offset"),
        )


@lru_cache(maxsize=16)
def member_columns(prefix: str, fields: tuple) -> dict:
    """The columns of a trend's fitted laws in FleetAnalysis.fits, in order: <prefix>_hours_scale,
    <prefix>_hours_offset, then <prefix>_<member>_<field> for every member and each of ``fields``
    (LawFits.line_fields), each with where its values are: (prefix, field, member index or None for a per-group
    array, and a member's column among the fields' arrays side by side, as degradation.FitColumns.floats lays
    them). LawFits.from_columns reads them back."""
    names = {f"{prefix}_hours_scale": (prefix, "hours_scale", None, None),
             f"{prefix}_hours_offset": (prefix, "hours_offset", None, None)}
    for j, m in enumerate(MEMBERS):
        for k, f in enumerate(fields):
            names[f"{prefix}_{m.name}_{f}"] = (prefix, f, j, k * len(MEMBERS) + j)
    return names


_PAIR_ROWS = 1 << 18  # readings x pairs worked on at once by LawFits.centred_on (bounds its memory)


def _centred_lines(fits, other, pg, pj, rows, first, order, group, hours, value, sigma, count, refuted_at, huber_k):
    """LawFits.centred_on for the pairs (group pg, member pj): the lines (a, b) on `other`'s shape at this trend's
    level, and where they are used. Each pair takes its group's readings (`rows` of them, from `first` in the
    group-sorted `order`)."""
    n_pairs = len(pg)
    pair = np.repeat(np.arange(n_pairs), rows)
    within = np.arange(len(pair)) - np.repeat(np.cumsum(rows) - rows, rows)
    at = order[first[pg][pair] + within]
    g, j = group[at], pj[pair]
    h = np.asarray(hours, dtype=float)[at]
    q = np.asarray(value, dtype=float)[at]
    w = 1.0 / np.asarray(sigma, dtype=float)[at] ** 2
    kind, log = _MEMBER_KIND[j], _MEMBER_LOG[j]
    x = h.copy()
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        u = np.maximum((h + other.hours_offset[g]) / other.hours_scale[g], 0.0)
        power, run_in = kind == 1, kind == 2
        for exponent in np.unique(_MEMBER_POWER[j[power]]):  # a scalar exponent, as member_x: numpy takes
            of_exponent = power & (_MEMBER_POWER[j] == exponent)  # u ** 2 and u ** 0.5 by other routes than pow
            x[of_exponent] = u[of_exponent] ** float(exponent)
        x[run_in] = run_in_x(u[run_in], _MEMBER_TAU[j[run_in]], _MEMBER_SHARE[j[run_in]])
        line = other.a[g, j] + other.b[g, j] * x
        shape = np.where(log, np.exp(line), line)
        ok = np.isfinite(shape)
        k, robust = _through_origin(pair, np.where(ok, shape, 0.0), q, np.where(ok, w, 0.0), n_pairs, huber_k)
        own = fits.a[g, j] + fits.b[g, j] * x
        own = np.where(log, np.exp(own), own)
        rw = w * robust
        shared = np.bincount(pair, np.nan_to_num(rw * (q - k[pair] * shape) ** 2), minlength=n_pairs)
        alone = np.bincount(pair, np.nan_to_num(rw * (q - own) ** 2), minlength=n_pairs)
        f_stat = (shared - alone) / (alone / np.maximum(count[pg] - 2, 1))
        pair_log = _MEMBER_LOG[pj]
        a = np.where(pair_log, other.a[pg, pj] + np.log(k), k * other.a[pg, pj])
        b = np.where(pair_log, other.b[pg, pj], k * other.b[pg, pj])
    use = (k > 0) & np.isfinite(a) & np.isfinite(b) & ~(f_stat > refuted_at[pg])
    return a, b, use


def member_x(member: Member, hours, hours_scale, hours_offset) -> np.ndarray:
    """The line's x of a member at interval hours (scale and offset broadcast against hours)."""
    h = np.asarray(hours, dtype=float)
    if member.law not in FAMILIES:
        return h
    with np.errstate(invalid="ignore", divide="ignore"):
        u = np.maximum((h + hours_offset) / hours_scale, 0.0)
    if member.law == "power":
        return u**member.power
    return run_in_x(u, member.tau, member.share)


def run_in_x(u, tau: float, share: float) -> np.ndarray:
    """x of a run-in member at u = (h + h0) / H: s (1 - e^(-u/tau)) / (1 - e^(-1/tau)) + (1 - s) u (0 at 0, 1 at 1)."""
    return share * -np.expm1(-u / tau) / -np.expm1(-1.0 / tau) + (1.0 - share) * u


def run_in_dx_du(u, tau: float, share: float) -> np.ndarray:
    """dx/du of a run-in member (for the growth rate)."""
    return share * np.exp(-u / tau) / (tau * -np.expm1(-1.0 / tau)) + (1.0 - share)


# Readings x members cells worked on at once by _fit_family_members: a block of a few MB stays in the CPU's cache
# and bounds memory however many readings a part holds.
_BLOCK_CELLS = 1 << 16


def _family_x(family: str, u: np.ndarray, log_u: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """x of every member of a family at u (readings x the family's members, in MEMBERS' order), each column as
    member_x gives it: the power law's u^p by one outer product of ln u, the run-in law's saturating part once
    per time constant for all its shares (MEMBERS holds them time constant by time constant). out: a block of
    that shape to fill (every step in place: a fresh block of this size costs more than the arithmetic)."""
    if out is None:
        out = np.empty((len(u), len(_FAMILY_POWERS) if family == "power" else _RUN_IN_SCALE.size * _RUN_IN_SHARES.size))
    if family == "power":
        return np.exp(np.multiply(log_u[:, None], _FAMILY_POWERS[None, :], out=out), out=out)
    rise = np.negative(np.expm1(np.divide(-u[:, None], _RUN_IN_TAUS[None, :])))
    # rise s / (1 - e^(-1/tau)) + u (1 - s), each step over whole rows of the block (the members' shares, scales
    # and steady shares laid out as its columns: numpy's loops then run along the rows, not nine columns at a time)
    np.multiply(np.repeat(rise, _RUN_IN_SHARES.size, axis=1), _RUN_IN_SHARE_COLUMNS, out=out)
    np.divide(out, _RUN_IN_SCALE_COLUMNS, out=out)
    return np.add(out, np.multiply(u[:, None], _RUN_IN_STEADY_COLUMNS), out=out)


def _segment_sum(values: np.ndarray, edges: list[tuple[int, int]], cells: np.ndarray | None = None) -> np.ndarray:
    """Sums of the rows of `values` (readings x columns) over each segment (start, end) of `edges`, each cell's
    readings added one after the other in their own order, as np.bincount does: the sums are the per-member
    code's to the last bit (np.add.reduceat would add pairwise, which differs in the last bits, and a fit's line
    can turn such a difference into a thousand times more). Rows of few columns are summed by one np.bincount
    over ``cells`` (_segment_cells: each cell's segment x columns + column), which adds in that same order; wider
    ones by one reduce along the rows per segment."""
    if cells is not None:
        return np.bincount(cells, values.ravel(), minlength=len(edges) * values.shape[1]).reshape(len(edges), -1)
    out = np.empty((len(edges), values.shape[1]))
    for row, (start, end) in enumerate(edges):
        np.add.reduce(values[start:end], axis=0, out=out[row])
    return out


_NARROW = 32  # up to this many columns a block's sums go by np.bincount (a row reduce pays its loop per row)


def _segment_cells(local: np.ndarray, columns: int, out: np.ndarray | None = None) -> np.ndarray | None:
    """The bin of each cell of a block (readings x columns, C order) for _segment_sum: its segment x columns + its
    column; None for a wide block. out: a block of integers (readings x columns) to fill."""
    if columns > _NARROW:
        return None
    if out is None:
        out = np.empty((len(local), columns), dtype=np.int64)
    return np.add((local * columns)[:, None], np.arange(columns)[None, :], out=out).ravel()


def _fit_family_members(family, group, hours, q, sigma, robust_w, clip, hours_scale, offset, n_groups, out,
                        deviance, only=None):
    """Fill the columns of `out` and `deviance` of the members of a law with many members (FAMILIES): one
    weighted least-squares pass per member with fixed weights (error model x Huber), from grouped sums; Huber's
    sandwich covariance as in fleet.trend.robust.fit_reweighted, clipped at the common robust scale `clip`.
    only: refit just these groups (a mask over groups), leaving the others' figures as they are.

    Every member at once: the readings sorted by group (stably, so each group's sums add in the readings' own
    order), the members' x as the columns of a block of readings, and each sum one segment sum over the block's
    rows; blocks of whole groups keep each pass in cache."""
    if only is not None or np.any(group[1:] < group[:-1]):  # (a part's readings come in order: taken as they are)
        keep = np.ones(len(group), dtype=bool) if only is None else only[group]
        order = np.flatnonzero(keep)
        order = order[np.argsort(group[order], kind="stable")]
        group, hours, q, sigma, robust_w = group[order], hours[order], q[order], sigma[order], robust_w[order]
    cols = _FAMILY_COLUMNS[family]
    n_params = _N_PARAMS[cols]
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
    fitted = np.flatnonzero(count > 0)  # groups with readings, in order: one segment each
    seg_start = np.concatenate([[0], np.cumsum(count[fitted])[:-1]]).astype(np.int64)
    seg_end = seg_start + count[fitted].astype(np.int64)
    per_block = max(_BLOCK_CELLS // len(n_params), 1)
    blocks = []  # whole groups up to about per_block readings (at least one group)
    first = 0
    while first < len(fitted):
        last = max(int(np.searchsorted(seg_end, seg_start[first] + per_block, side="right")), first + 1)
        blocks.append((first, last))
        first = last
    # The blocks' x, two scratch blocks for every product, and the sums' bins: made once for the largest block
    # and filled in place (fresh blocks of this size cost more than the arithmetic on them)
    columns = len(n_params)
    most = max((int(seg_end[last - 1] - seg_start[first]) for first, last in blocks), default=0) * columns
    x_cells, wx_cells, part_cells = np.empty(most), np.empty(most), np.empty(most)
    bin_cells = np.empty(most if columns <= _NARROW else 0, dtype=np.int64)
    for first, last in blocks:
        lo, hi = seg_start[first], seg_end[last - 1]
        shape = (int(hi - lo), columns)
        gs = fitted[first:last]
        edges = list(zip((seg_start[first:last] - lo).tolist(), (seg_end[first:last] - lo).tolist(), strict=True))
        local = np.repeat(np.arange(last - first), count[gs].astype(np.int64))
        size = shape[0] * columns
        x = _family_x(family, u[lo:hi], log_u[lo:hi], out=x_cells[:size].reshape(shape))
        cells = _segment_cells(local, columns, bin_cells[:size].reshape(shape) if bin_cells.size else None)
        qb, mb, wb = q[lo:hi, None], model_w[lo:hi, None], w[lo:hi, None]
        wx = np.multiply(wb, x, out=wx_cells[:size].reshape(shape))
        part = np.multiply(wx, x, out=part_cells[:size].reshape(shape))
        sx = _segment_sum(wx, edges, cells)
        sxx = _segment_sum(part, edges, cells)
        sxy = _segment_sum(np.multiply(wx, qb, out=part), edges, cells)
        mxb = np.multiply(mb, x, out=wx)
        mx_sum = _segment_sum(mxb, edges, cells)
        mxx_sum = _segment_sum(np.multiply(mxb, x, out=part), edges, cells)
        n_g, s0_g, sy_g, m0_g = count[gs, None], s0[gs, None], sy[gs, None], m0[gs, None]
        with np.errstate(invalid="ignore", divide="ignore"):
            x_mean, y_mean = sx / s0_g, sy_g / s0_g
            spread = sxx - sx * x_mean
            b = np.where(spread > 1e-12 * s0_g, (sxy - sx * y_mean) / spread, np.nan)  # no spread: one hour value
            a = y_mean - b * x_mean
            # z2 = (q - a - b x)^2 m, in the scratch blocks
            if hi - lo >= 64 * len(edges):  # long segments: each group's a and b broadcast over its rows
                for row, (start, end) in enumerate(edges):
                    np.multiply(b[row], x[start:end], out=wx[start:end])
                    np.subtract(qb[start:end], a[row], out=part[start:end])
                bx = wx
                z2 = np.subtract(part, bx, out=part)
            else:  # many short ones: a and b picked per row
                bx = np.multiply(np.take(b, local, axis=0, out=wx), x, out=wx)
                z2 = np.subtract(np.subtract(qb, np.take(a, local, axis=0, out=part), out=part), bx, out=part)
            np.multiply(np.square(z2, out=z2), mb, out=z2)
            c2 = clip2[lo:hi, None]
            inside = _segment_sum(np.less_equal(z2, c2, out=wx), edges, cells)
            psi2 = _segment_sum(np.minimum(z2, c2, out=z2), edges, cells)
            dof = n_g - n_params
            scale2 = np.where(dof > 0, psi2 / np.where(dof > 0, dof, 1.0), np.nan) / (inside / n_g) ** 2
            mx = mx_sum / m0_g
            msxx = mxx_sum - mx_sum * mx
            inv_sxx = np.where(msxx > 1e-12 * m0_g, 1.0 / msxx, np.nan)
            var_a = scale2 * (1.0 / m0_g + mx**2 * inv_sxx)
        values = {"a": a, "b": b, "var_a": var_a, "var_b": scale2 * inv_sxx, "cov_ab": -scale2 * mx * inv_sxx,
                  "dof": np.broadcast_to(dof, a.shape), "scale": np.sqrt(scale2)}
        for name, value in values.items():
            out[name][gs, cols] = value
        deviance[gs, cols] = psi2
    # A group without readings (among those refitted) has no line: as the sums over nothing give.
    empty = np.flatnonzero((count == 0) & (np.ones(n_groups, dtype=bool) if only is None else only))
    if empty.size:
        for name in ("a", "b", "var_a", "var_b", "cov_ab", "scale"):
            out[name][empty, cols] = np.nan
        out["dof"][empty, cols] = -n_params
        deviance[empty, cols] = 0.0


def _best_family_huber(family, group, hours, q, sigma, out, deviance, hours_scale, offset, n_groups, settings):
    """Huber weights of each reading about its group's best-fitting line of the family (smallest deviance)."""
    of_family = OF_LAW[family]
    family_dev = np.where(np.isfinite(deviance[:, of_family]), deviance[:, of_family], np.inf)
    best = np.flatnonzero(of_family)[np.argmin(family_dev, axis=1)]
    fitted = np.full(len(q), np.nan)
    # The readings of each best member, in their own order (one stable sort by member, not a pass over every
    # reading per member): member_x then gets the very arrays a mask per member would pick.
    member = best[group].astype(np.int16)  # a small integer key: numpy's stable sort of it is a radix sort
    order = np.argsort(member, kind="stable")
    counts = np.bincount(member, minlength=len(MEMBERS))
    ends = np.cumsum(counts)
    for j in np.flatnonzero(counts).tolist():
        at = order[ends[j] - counts[j]:ends[j]]
        g = group[at]
        x = member_x(MEMBERS[j], hours[at], hours_scale[g], offset[g])
        fitted[at] = out["a"][g, j] + out["b"][g, j] * x
    z = (q - fitted) / sigma
    u = np.abs(z) / robust_scale(group, z, n_groups)[group]
    return huber_weights(u, settings.huber_k)


def run_in_identifiable(group, hours, hours_scale, offset, n_groups) -> np.ndarray:
    """Per group and member: False for a run-in member whose early part the readings do not show (the first
    reading later than RUN_IN_REACH tau after the start, or fewer than two readings before then). The count is
    taken once per time constant: the members of one tau share it."""
    ok = np.ones((n_groups, len(MEMBERS)), dtype=bool)
    with np.errstate(invalid="ignore", divide="ignore"):
        u = (hours + offset[group]) / hours_scale[group]
    taus = _RUN_IN_TAU_OF_MEMBER
    for tau in dict.fromkeys(taus[np.isfinite(taus)]):
        ok[:, taus == tau] = (np.bincount(group, u <= RUN_IN_REACH * tau, minlength=n_groups) >= 2)[:, None]
    return ok


def _through_origin(group, x, y, w, n_groups, huber_k: float) -> tuple[np.ndarray, np.ndarray]:
    """Per group the slope k of y = k x by weighted least squares through the origin, then a few passes with
    Huber weights about the line (the scale as fleet.trend.robust.robust_scale), so that a gross outlier of y
    moves k little; returns k and the last Huber weights."""
    robust = np.ones_like(y)
    root_w = np.sqrt(w)
    # scratch arrays filled in place in every pass (fresh ones of a part's size fault their pages in afresh)
    wx, term, z = np.empty_like(y), np.empty_like(y), np.empty_like(y)
    block = []
    for _ in range(4):
        # the common factor of both sums, w x robust x, multiplied in the same order as each of them
        np.multiply(np.multiply(w, robust, out=wx), x, out=wx)
        sxx = np.bincount(group, np.multiply(wx, x, out=term), minlength=n_groups)
        with np.errstate(invalid="ignore", divide="ignore"):
            k = np.where(sxx > 0, np.bincount(group, np.multiply(wx, y, out=term), minlength=n_groups) / sxx, np.nan)
            np.multiply(np.subtract(y, np.multiply(k[group], x, out=z), out=z), root_w, out=z)
            scale = _mad_scale(group, np.nan_to_num(z, copy=True), n_groups, block)
            u = np.divide(np.abs(z, out=term), scale[group], out=term)
            robust = np.where(u > huber_k, huber_k / u, 1.0)
    return k, robust


def _mad_scale(group, z, n_groups, scratch: list | None = None) -> np.ndarray:
    """fleet.trend.robust.robust_scale (1.4826 x median |z| per group, never below 1) by one sort: called on the
    readings of many (group, member) pairs, where a grouped median's fixed cost would dominate. Each group's
    values sorted in a row of their own (padded), a far cheaper sort than one of every value by group; a lexical
    sort where one group is so much longer than the rest that the rows would be mostly padding. scratch: a list
    that keeps the padded block between calls of one shape (a caller's passes), refilled rather than made anew."""
    a = np.abs(z)
    count = np.bincount(group, minlength=n_groups)
    has = count > 0
    width = int(count.max(initial=0))
    if not a.size:
        return np.ones(n_groups)
    if width * n_groups <= 4 * a.size + 4096:
        if np.any(group[1:] < group[:-1]):
            by_group = np.argsort(group, kind="stable")
            group, a = group[by_group], a[by_group]
        if scratch is not None and scratch and scratch[0].size == n_groups * width:  # the caller's block, again
            block = scratch[0].reshape(n_groups, width)
            block.fill(np.inf)
        else:
            block = np.full((n_groups, width), np.inf)
            if scratch is not None:
                scratch[:] = [block]
        # each value at its group's row, in the place after its group's earlier ones (one flat index)
        block.ravel()[np.arange(a.size) + np.repeat(np.arange(n_groups) * width - (np.cumsum(count) - count),
                                                    count)] = a
        block.sort(axis=1)
        picks = np.arange(n_groups)
        lo = block[picks, np.maximum((count - 1) // 2, 0)]
        hi = block[picks, np.minimum(count // 2, width - 1)]
    else:
        order = np.lexsort((a, group))
        start = np.concatenate([[0], np.cumsum(count)[:-1]])
        sorted_a = a[order]
        lo = sorted_a[np.where(has, start + (count - 1) // 2, 0)]
        hi = sorted_a[np.where(has, start + count // 2, 0)]
    return np.maximum(1.4826 * np.where(has, 0.5 * (lo + hi), 1.0), 1.0)


def aicc(n, n_params, deviance) -> np.ndarray:
    """Small-sample AIC of a least-squares fit: n ln(D / n) + 2K + 2K(K + 1) / (n - K - 1); NaN if n <= K + 1."""
    n = np.asarray(n, dtype=float)
    k = np.asarray(n_params, dtype=float)  # one K, or one per column
    ok = (n - k - 1.0 > 0) & np.isfinite(deviance) & (np.asarray(deviance) > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        value = n * np.log(np.asarray(deviance, dtype=float) / n) + 2 * k + 2 * k * (k + 1) / (n - k - 1)
    return np.where(ok, value, np.nan)


def akaike_weights(criterion: np.ndarray, fallback: int = 0) -> np.ndarray:
    """exp(-delta / 2) / sum, delta from the row's smallest criterion; NaN entries get weight 0.

    A row with no finite entry gets all its weight on column `fallback` (by default the first, the exponential
    law)."""
    c = np.atleast_2d(np.asarray(criterion, dtype=float))
    finite = np.isfinite(c)
    best = np.min(np.where(finite, c, np.inf), axis=1, keepdims=True)
    best = np.where(np.isfinite(best), best, 0.0)
    # exp of each finite entry's -delta / 2 (<= 0: nothing can overflow), the others' weight 0; a sum of such
    # terms divided only where it is positive: no error state need be entered
    raw = np.where(finite, np.exp(-0.5 * (np.where(finite, c, best) - best)), 0.0)
    total = raw.sum(axis=1, keepdims=True)
    alone = np.zeros_like(c)
    alone[:, fallback] = 1.0
    return np.where(total > 0, raw / np.where(total > 0, total, 1.0), alone)


def fit_wear_laws(
    group: np.ndarray,
    hours: np.ndarray,
    value: np.ndarray,
    sigma_of,
    floor: np.ndarray,
    n_groups: int,
    settings: AnalysisSettings,
    hours_offset: np.ndarray | None = None,
) -> LawFits:
    """Fit every member for every group and weigh them.

    value: referred flow q per reading (already floored at `floor`, a small positive flow). sigma_of(q_fitted
    or None) gives each reading's standard deviation of q under the error model (None: at the readings).
    hours_offset: h0 per group (default 0).
    """
    q = np.maximum(value, floor)
    log_q = np.log(q)
    count = np.bincount(group, minlength=n_groups).astype(float)
    offset = np.zeros(n_groups) if hours_offset is None else np.nan_to_num(np.asarray(hours_offset, float))
    last = group_max(group, hours, n_groups)
    first = group_min(group, hours, n_groups)
    hours_scale = np.where(last + offset > 0, last + offset, np.nan)

    def log_variance(fitted_log):
        if fitted_log is None:
            return (sigma_of(None) / q) ** 2
        with np.errstate(over="ignore"):
            q_fit = np.maximum(np.exp(fitted_log), floor)
        return (sigma_of(q_fit) / q_fit) ** 2

    def lin_variance(fitted):
        return sigma_of(None if fitted is None else np.maximum(fitted, floor)) ** 2

    shape = (n_groups, len(MEMBERS))
    out = {f: np.full(shape, np.nan) for f in (*FIELDS, "scale")}
    fitted_q = np.full((len(q), 2), np.nan)
    huber = {}
    for j, m in enumerate(MEMBERS[:2]):  # the exponential and the linear law, each reweighted on its own
        fit, huber[m.law] = fit_reweighted(
            group, hours, log_q if m.log_space else q, log_variance if m.log_space else lin_variance,
            n_groups, settings, m.log_space, m.n_params,
        )
        for f in (*FIELDS[:-1], "scale"):
            out[f][:, j] = getattr(fit, f)
        line = fit.a[group] + fit.b[group] * hours
        with np.errstate(over="ignore"):
            fitted_q[:, j] = np.exp(line) if m.log_space else line

    # Scores on the common scale: q residuals over the error model's sigma at the default law's fit.
    sigma = sigma_of(np.maximum(np.nan_to_num(fitted_q[:, 0], nan=1.0), floor))
    z = (q[:, None] - fitted_q[:, :2]) / sigma[:, None]
    clip = settings.huber_k * np.fmin(robust_scale(group, z[:, 0], n_groups), robust_scale(group, z[:, 1], n_groups))
    deviance = np.full(shape, np.nan)
    for j in range(2):
        deviance[:, j] = np.bincount(group, np.minimum(z[:, j] ** 2, clip[group] ** 2), minlength=n_groups)
    # The lines of the power and run-in laws take shared Huber weights, one weighted pass each (their members
    # are many, the outliers the same): a reading is an outlier when the exponential law and the linear law
    # find it far off and, where a line of the family fits best of all, that line too (a first pass finds it;
    # without it, readings that only the exponential and linear laws miss, as on an accelerating pump, would
    # lose their weight).
    robust_w = np.fmax(huber["exponential"], huber["linear"])
    identifiable = run_in_identifiable(group, hours, hours_scale, offset, n_groups)
    allowed = _allowed_members(tuple(settings.wear_laws))
    for family in FAMILIES:
        if family not in settings.wear_laws:
            continue
        of_family = OF_LAW[family]
        _fit_family_members(family, group, hours, q, sigma, robust_w, clip, hours_scale, offset, n_groups, out,
                            deviance)
        deviance = np.where(identifiable, deviance, np.nan)
        spared = np.fmax(robust_w, _best_family_huber(family, group, hours, q, sigma, out, deviance, hours_scale,
                                                      offset, n_groups, settings))
        best_dev = np.min(np.where(np.isfinite(deviance[:, of_family]), deviance[:, of_family], np.inf), axis=1)
        family_best = best_dev < np.fmin(deviance[:, 0], deviance[:, 1])
        changed = family_best & (np.bincount(group, spared != robust_w, minlength=n_groups) > 0)
        if changed.any():
            _fit_family_members(family, group, hours, q, sigma, spared, clip, hours_scale, offset, n_groups, out,
                                deviance, only=changed)
            deviance = np.where(identifiable, deviance, np.nan)
    usable = (np.isfinite(out["a"]) & np.isfinite(out["b"]) & np.isfinite(out["var_b"]) & np.isfinite(deviance)
              & allowed & identifiable)
    deviance = np.where(usable, np.maximum(deviance, 1e-12 * count[:, None]), np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        fit_term = count[:, None] * np.log(deviance / count[:, None])
    law_score = _law_scores(count, deviance)
    member_score = fit_term
    if settings.law_weighting == "held_back":
        held = _held_back_scores(
            group, hours, q, log_q, sigma, np.fmax(huber["exponential"], huber["linear"]), fitted_q, floor,
            hours_scale, offset, first, last, clip, n_groups, settings,
        )
        if held is not None:
            member_crit = np.where(usable, -2.0 * held, np.nan)
            scored = np.isfinite(member_crit[:, :2]).all(axis=1, keepdims=True)
            held_law = np.column_stack([_family_criterion(member_crit, law) for law in LAWS])
            law_score = np.where(scored, held_law, law_score)
            member_score = np.where(scored, member_crit, member_score)
    out["weight"] = np.zeros(shape)
    laws = LawFits(
        **out,
        hours_scale=hours_scale,
        hours_offset=offset,
        n_points=count,
        law_score=law_score,
        member_score=member_score,
        usable=usable,
        allowed=tuple(law for law in LAWS if law in settings.wear_laws),
    )
    laws.weigh(law_score, laws.member_score)
    return laws


@lru_cache(maxsize=8)
def _allowed_members(laws: tuple) -> np.ndarray:
    """The members of the laws compared (AnalysisSettings.wear_laws), as a read-only mask over MEMBERS."""
    allowed = np.array([m.law in laws for m in MEMBERS])
    allowed.setflags(write=False)
    return allowed


# Where each law's members start in MEMBERS (they stand together, law after law) and each law's K (_law_scores).
_LAW_STARTS = np.array([np.flatnonzero(OF_LAW[law])[0] for law in LAWS])
assert all(np.array_equal(np.flatnonzero(OF_LAW[law]), np.arange(start, end)) for law, start, end in zip(
    LAWS, _LAW_STARTS, [*_LAW_STARTS[1:], len(MEMBERS)], strict=True))
_LAW_K = np.array([float(LAW_PARAMS[law]) for law in LAWS])


def _law_scores(count, deviance) -> np.ndarray:
    """Per group and law (columns as LAWS) the AICc of the law on its best member's deviance (NaN where no member is
    usable): each law's best member by one reduce over its run of columns, every law's K side by side (the same
    arithmetic per value as one law at a time, which tests/test_trend_law_scores.py keeps as the reference)."""
    best = np.minimum.reduceat(np.where(np.isfinite(deviance), deviance, np.inf), _LAW_STARTS, axis=1)
    return aicc(np.asarray(count, dtype=float)[:, None], _LAW_K[None, :], np.where(np.isfinite(best), best, np.nan))


def _family_criterion(member_crit, law: str) -> np.ndarray:
    """A law's held-back criterion: its one member's, or for a family -2 ln of its members' mean likelihood."""
    of_law = OF_LAW[law]
    crit = member_crit[:, of_law]
    if crit.shape[1] == 1:
        return crit[:, 0]
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a group no member could score stays NaN
        top = np.nanmin(crit, axis=1, keepdims=True)
        return (top - 2.0 * np.log(np.nanmean(np.exp(-0.5 * (crit - top)), axis=1, keepdims=True)))[:, 0]


def _held_back_scores(group, hours, q, log_q, sigma, robust_w, fitted_q, floor, hours_scale, offset, first, last,
                      clip, n_groups, settings):
    """Log predictive density of the last readings (the final `law_held_back` share of the hours spanned) under
    each member fitted to the earlier ones, Huber-clipped like the in-sample scores. NaN where a group has
    fewer than 4 earlier or 2 later readings."""
    cut = first + (1.0 - settings.law_held_back) * (last - first)
    train = hours <= cut[group]
    n_train = np.bincount(group[train], minlength=n_groups)
    n_test = np.bincount(group[~train], minlength=n_groups)
    ok = (n_train >= 4) & (n_test >= 2)
    if not ok.any():
        return None
    g, test = group[train], ~train
    q_exp = np.maximum(np.nan_to_num(fitted_q[:, 0], nan=1.0), floor)
    scores = np.full((n_groups, len(MEMBERS)), np.nan)
    for j, m in enumerate(MEMBERS):
        x = member_x(m, hours, hours_scale[group], offset[group])
        y = log_q if m.log_space else q
        model_var = (sigma / q_exp) ** 2 if m.log_space else sigma**2
        fit, _ = fit_reweighted(g, x[train], y[train], lambda _f, v=model_var[train]: v, n_groups, settings,
                                m.log_space, m.n_params, robust_w=robust_w[train])
        gt, xt = group[test], x[test]
        line = fit.a[gt] + fit.b[gt] * xt
        var_line = fit.var_a[gt] + 2 * xt * fit.cov_ab[gt] + xt * xt * fit.var_b[gt]
        with np.errstate(over="ignore", invalid="ignore"):
            mean = np.exp(line) if m.log_space else line
            var = (mean * mean * var_line if m.log_space else var_line) + sigma[test] ** 2
            z2 = np.minimum((q[test] - mean) ** 2 / var, clip[gt] ** 2)
            logdens = -0.5 * (z2 + np.log(var / sigma[test] ** 2))
        total = np.bincount(gt, np.nan_to_num(logdens, nan=-1e6), minlength=n_groups)
        bad = np.bincount(gt, ~np.isfinite(logdens), minlength=n_groups) > 0
        scores[:, j] = np.where(ok & ~bad, total, np.nan)
    return scores


def joint_score(*scores: np.ndarray) -> np.ndarray:
    """AICc of "every trend follows the same law": the sum over the trends that could be scored.

    Slip and case drain come through the same clearances, so they wear by one law; the better-measured
    trend then tells the other its shape. A law that could not be scored on a trend that scored others
    stays unscored (NaN).
    """
    stack = np.stack(scores)
    scored = np.isfinite(stack).any(axis=2, keepdims=True)  # the trend scored some law
    missing = scored & ~np.isfinite(stack)
    total = np.where(scored, np.nan_to_num(stack, nan=0.0), 0.0).sum(axis=0)
    return np.where(missing.any(axis=0) | ~scored.any(axis=0), np.nan, total)
