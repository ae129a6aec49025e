"""Shape priors pooled over a fleet: how the power law's exponents and the run-in law's shapes are spread among
the service intervals of one pump kind, fitted from those intervals' own readings (empirical Bayes).

A pump's readings often cannot tell an exponent of 1.7 from one of 2.8: the likelihood over the family's grid is
flat, and a flat prior then averages the forecast over every exponent the grid holds. Pumps of one kind wear in
like ways, so the kind's other intervals say which exponents are common. The prior over the members of a family
(fleet.trend.wear_laws.FAMILIES) is the maximum-likelihood mixing distribution over the family's grid: the
nonparametric maximum-likelihood estimate of a mixing distribution on a fixed grid (Laird 1978, J. Am. Stat.
Assoc. 73: 805-811), found by the EM algorithm (Dempster, Laird & Rubin 1977). Each interval counts by the weight
its readings give the family (its AICc law weight): a prior over the exponents of accelerating wear comes from the
intervals that look like accelerating wear. The member weights within a family are then prior x likelihood,
renormalised (Bayes' rule), in place of the flat prior's likelihood alone, and each family's law is scored by its
likelihood with the shape integrated out under that prior (marginal_law_score: one parameter fewer than with the
best member's shape fitted). The forecast follows these weights (LawFits.centre_weight); the band keeps the flat
prior's, joined with the band of the law the forecast follows: weighed on the pooled prior too, it held the
truth for only 83 to 86 % of accelerating pumps on the invented fleets of benchmarks/calibration.py.

A kind with fewer than `min_intervals` of a family's worth of weight takes the prior of all kinds pooled; with
fewer than that in the whole fleet, the prior stays flat.
"""

import numpy as np
import pandas as pd

from fleet.trend.wear_laws import FAMILIES, LAW_PARAMS, LAWS, MEMBERS, akaike_weights

# Floor of a member's prior, as a share of the flat prior 1 / (members of the family): the EM estimate puts its
# mass on few grid points, and a member a kind has not shown yet must still be able to win where one interval's
# readings clearly favour it. Our choice.
PRIOR_FLOOR_SHARE = 0.05
EM_ITERATIONS = 200
EM_TOLERANCE = 1e-7
ALL_KINDS = "*"  # the row of the priors pooled over every kind
MEMBER_NAMES = tuple(m.name for m in MEMBERS)


def _family_columns(family: str) -> np.ndarray:
    return np.flatnonzero([m.law == family for m in MEMBERS])


def member_likelihood(member_score: np.ndarray, usable: np.ndarray, family: str) -> np.ndarray:
    """Per interval and member of the family, the likelihood relative to the family's best member,
    exp(-(score - best) / 2) (scores n ln(D / n), the same K within a family); 0 where a member is not usable."""
    cols = _family_columns(family)
    score = np.where(usable[:, cols], member_score[:, cols], np.nan)
    finite = np.isfinite(score)
    best = np.min(np.where(finite, score, np.inf), axis=1, keepdims=True)
    with np.errstate(invalid="ignore", over="ignore"):
        return np.where(finite, np.exp(-0.5 * (score - np.where(np.isfinite(best), best, 0.0))), 0.0)


def mixing_distribution(likelihood: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """The maximum-likelihood prior pi over the columns given each row's likelihoods (rows weighted by counts):
    maximises sum_i c_i ln(sum_j pi_j L_ij) by EM, pi_j <- sum_i c_i post_ij / sum_i c_i with post_ij =
    pi_j L_ij / sum_k pi_k L_ik. Rows with no positive likelihood or no count are left out."""
    keep = (likelihood.sum(axis=1) > 0) & (counts > 0)
    like, c = likelihood[keep], counts[keep]
    n_cols = likelihood.shape[1]
    prior = np.full(n_cols, 1.0 / n_cols)
    if not len(like):
        return prior
    total = c.sum()
    for _ in range(EM_ITERATIONS):
        joint = like * prior
        with np.errstate(invalid="ignore", divide="ignore"):  # a row whose members all lost their prior: no say
            post = np.nan_to_num(joint / joint.sum(axis=1, keepdims=True))
        new = (c[:, None] * post).sum(axis=0) / total
        if np.max(np.abs(new - prior)) < EM_TOLERANCE:
            prior = new
            break
        prior = new
    return prior


def fit_shape_priors(law_score: np.ndarray, member_score: np.ndarray, usable: np.ndarray, kinds,
                     min_intervals: float) -> pd.DataFrame:
    """One row per pump kind (and ALL_KINDS, every interval pooled), one column per member of MEMBERS: the prior
    weight of the member within its family (each family's columns sum to 1; the exponential and linear columns
    1). law_score: AICc per interval and law (columns as LAWS) that weighs each interval's say; member_score and
    usable as LawFits. kinds: the pump kind of each interval."""
    kinds = np.asarray(kinds, dtype=object)
    law_w = akaike_weights(law_score)
    scored = np.isfinite(law_score).any(axis=1)
    rows = {}
    for kind in (ALL_KINDS, *sorted({k for k in kinds if k is not None and k == k})):
        at = scored & (kinds == kind) if kind != ALL_KINDS else scored
        row = np.ones(len(MEMBERS))
        for family in FAMILIES:
            cols = _family_columns(family)
            counts = law_w[at, LAWS.index(family)]
            if counts.sum() < min_intervals:
                row[cols] = np.nan  # too few intervals of this family: the caller falls back
                continue
            row[cols] = mixing_distribution(member_likelihood(member_score[at], usable[at], family), counts)
        rows[kind] = row
    priors = pd.DataFrame.from_dict(rows, orient="index", columns=list(MEMBER_NAMES))
    for family in FAMILIES:  # a kind short of a family takes the pooled prior; a fleet short of it, the flat one
        cols = [MEMBER_NAMES[j] for j in _family_columns(family)]
        flat = 1.0 / len(cols)
        pooled = priors.loc[ALL_KINDS, cols].fillna(flat)
        priors.loc[ALL_KINDS, cols] = pooled.to_numpy()
        priors[cols] = priors[cols].fillna(pooled)
        floored = np.maximum(priors[cols].to_numpy(), PRIOR_FLOOR_SHARE * flat)
        priors[cols] = floored / floored.sum(axis=1, keepdims=True)
    priors.index.name = "kind"
    return priors


def pool_shapes(trends, law_score: np.ndarray, member_score: np.ndarray, kinds, settings,
                priors: pd.DataFrame | None = None) -> pd.DataFrame:
    """Give each trend (LawFits, already weighed on the flat prior) the weights its forecast follows: the laws
    by marginal_law_score, the members within a family by prior x likelihood. The priors are those given (rows
    as fit_shape_priors, an ALL_KINDS row among them) or else fitted from these intervals' scores (AICc per law,
    n ln(D / n) per member: the joint ones of every trend of an interval); returns the priors."""
    usable = np.logical_or.reduce([laws.usable for laws in trends])
    if priors is None:
        priors = fit_shape_priors(law_score, member_score, usable, kinds, settings.shape_prior_min_intervals)
    log_prior = member_log_prior(priors, kinds)
    marginal = marginal_law_score(law_score, member_score, usable, log_prior, [laws.n_points for laws in trends])
    for laws in trends:
        flat = laws.weight
        laws.weigh(marginal, member_score, log_prior)
        laws.centre_weight, laws.weight = laws.weight, flat
    return priors


def marginal_law_score(law_score: np.ndarray, member_score: np.ndarray, usable: np.ndarray, log_prior: np.ndarray,
                       n_points) -> np.ndarray:
    """The laws' AICc with each family's shape integrated out under its prior rather than fitted: the family's
    fit term -2 ln sum_j pi_j exp(-s_j / 2) in place of its best member's s_best, and one parameter fewer in the
    penalty 2K + 2K(K + 1) / (n - K - 1) of each trend scored (n_points: readings per interval of each trend
    whose scores are summed in law_score). The exponential and linear laws keep theirs."""
    out = np.array(law_score, dtype=float, copy=True)
    for family in FAMILIES:
        cols = _family_columns(family)
        k = float(LAW_PARAMS[family])
        likelihood = member_likelihood(member_score, usable, family)  # relative to the best member
        with np.errstate(divide="ignore", invalid="ignore"):
            extra = -2.0 * np.log(np.sum(likelihood * np.exp(log_prior[:, cols]), axis=1))
        fewer = np.zeros(len(out))
        for n in n_points:
            n = np.nan_to_num(np.asarray(n, dtype=float))
            scored = n - k - 1.0 > 0
            with np.errstate(divide="ignore", invalid="ignore"):
                drop = 2.0 + 2.0 * k * (k + 1) / (n - k - 1) - 2.0 * (k - 1) * k / (n - k)
            fewer += np.where(scored, drop, 0.0)
        f = LAWS.index(family)
        out[:, f] = np.where(np.isfinite(extra), out[:, f] + extra - fewer, out[:, f])
    return out


def member_log_prior(priors: pd.DataFrame, kinds) -> np.ndarray:
    """Per interval (its pump kind) and member, the log prior weight within the member's family; a kind the
    priors do not hold takes the pooled row."""
    kinds = pd.Index(np.asarray(kinds, dtype=object))
    table = priors.reindex(columns=list(MEMBER_NAMES)).reindex(kinds).fillna(priors.loc[ALL_KINDS])
    with np.errstate(divide="ignore"):
        return np.log(table.to_numpy(dtype=float))
