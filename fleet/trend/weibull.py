"""Fleet prior: a 2-parameter Weibull of running hours between interval resets, per pump kind.

Maximum likelihood with right censoring (intervals still running) and left truncation (an interval we
started watching part-way through its life). For a fixed shape beta the scale has a closed form,
alpha^beta = sum(t^beta - t0^beta) / r, so the likelihood is maximised over beta alone.
"""

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import optimize, special

B10_SURVIVAL = 0.9


@dataclass(frozen=True)
class WeibullFit:
    beta: float
    alpha: float
    n_failures: int
    n_suspensions: int

    @property
    def b10_hours(self) -> float:
        """Hours by which 10 % of intervals end in a reset: alpha (-ln 0.9)^(1/beta)."""
        return self.alpha * (-np.log(B10_SURVIVAL)) ** (1.0 / self.beta)


def _profile_alpha(beta: float, t, t0, failed) -> float:
    r = failed.sum()
    exposure = np.sum((t / t.max()) ** beta - (t0 / t.max()) ** beta)
    return t.max() * (exposure / r) ** (1.0 / beta)


def _neg_profile_loglik(log_beta: float, t, t0, failed) -> float:
    beta = np.exp(log_beta)
    alpha = _profile_alpha(beta, t, t0, failed)
    z = (t / alpha) ** beta - (t0 / alpha) ** beta
    log_f = np.log(beta / alpha) + (beta - 1.0) * np.log(t[failed] / alpha)
    return -(log_f.sum() - z.sum())


def fit_weibull(life_hours, failed, entry_hours=None) -> WeibullFit:
    """Maximum-likelihood Weibull (beta, alpha) of lives; failed False = right-censored (still running).

    entry_hours: age when observation began (left truncation), 0 by default. Raises ValueError with fewer
    than two failures or non-positive lives.
    """
    t = np.asarray(life_hours, dtype=float)
    failed = np.asarray(failed, dtype=bool)
    t0 = np.zeros_like(t) if entry_hours is None else np.asarray(entry_hours, dtype=float)
    if np.any(~(t > 0)) or np.any(t0 < 0) or np.any(t0 > t):
        raise ValueError("Weibull fit: lives must be positive and not shorter than their entry age")
    if failed.sum() < 2:
        raise ValueError("Weibull fit: needs at least two failures")
    res = optimize.minimize_scalar(
        _neg_profile_loglik,
        bounds=(np.log(0.05), np.log(50.0)),
        args=(t, t0, failed),
        method="bounded",
        options={"xatol": 1e-10},
    )
    beta = float(np.exp(res.x))
    return WeibullFit(beta, float(_profile_alpha(beta, t, t0, failed)), int(failed.sum()), int((~failed).sum()))


def mean_residual_life(age_hours, beta, alpha):
    """E[T - t | T > t] for a Weibull: alpha Gamma(1 + 1/beta) Q(1/beta, z) / exp(-z), z = (t/alpha)^beta.

    Q is the regularised upper incomplete gamma function (scipy.special.gammaincc). Far in the tail both
    factors underflow; there the asymptote 1 / hazard = t / (beta z) is used.
    """
    t = np.maximum(np.asarray(age_hours, dtype=float), 0.0)
    beta = np.asarray(beta, dtype=float)
    alpha = np.asarray(alpha, dtype=float)
    z = (t / alpha) ** beta
    tail = z > 500.0
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        exact = (
            alpha * special.gamma(1.0 + 1.0 / beta) * special.gammaincc(1.0 / beta, z) * np.exp(np.where(tail, 0, z))
        )
        asymptote = t / (beta * np.where(z > 0, z, np.nan))
    return np.where(tail, asymptote, exact)


def conditional_failure_probability(age_hours, horizon_hours, beta, alpha):
    """P(T <= t + dt | T > t) = 1 - exp(z(t) - z(t + dt)), z = (t/alpha)^beta."""
    t = np.maximum(np.asarray(age_hours, dtype=float), 0.0)
    dt = np.maximum(np.asarray(horizon_hours, dtype=float), 0.0)
    z0 = (t / alpha) ** beta
    z1 = ((t + dt) / alpha) ** beta
    return -np.expm1(z0 - z1)


def fit_fleet_priors(lives: pd.DataFrame, kind_of_pump: pd.Series, min_failures: int = 3) -> pd.DataFrame:
    """One row per pump kind: beta, alpha, b10_hours, n_failures, n_suspensions, note.

    lives: intervals.interval_lives output (pump_id, entry_hours, life_hours, failed). A kind with fewer
    than min_failures completed intervals gets no fit and a note saying so. fit_kind_priors does the work.
    """
    return fit_kind_priors(sorted(kind_of_pump.dropna().unique()),
                           lives["pump_id"].map(kind_of_pump).to_numpy(dtype=object), lives["entry_hours"],
                           lives["life_hours"], lives["failed"], min_failures)


def fit_kind_priors(kinds, life_kind, entry_hours, life_hours, failed, min_failures: int = 3) -> pd.DataFrame:
    """fit_fleet_priors on plain arrays: one row per kind of ``kinds`` (in that order), fitted from the lives
    whose kind (``life_kind``, one per life) is that kind, taken in the order given. A loop per kind."""
    life_kind = np.asarray(life_kind, dtype=object)
    entry = np.asarray(entry_hours, dtype=float)
    life = np.asarray(life_hours, dtype=float)
    failed = np.asarray(failed, dtype=bool)
    rows = []
    for kind in kinds:
        mine = life_kind == kind
        kind_failed = failed[mine]
        n_fail, n_susp = int(kind_failed.sum()), int((~kind_failed).sum())
        row = {
            "kind": kind,
            "beta": np.nan,
            "alpha": np.nan,
            "b10_hours": np.nan,
            "n_failures": n_fail,
            "n_suspensions": n_susp,
            "note": None,
        }
        if n_fail < min_failures:
            row["note"] = (
                f"No fleet life figures for {kind}: {n_fail} completed interval"
                f"{'s' if n_fail != 1 else ''} on record, {min_failures} needed."
            )
        else:
            fit = fit_weibull(life[mine], kind_failed, entry[mine])
            row.update(beta=fit.beta, alpha=fit.alpha, b10_hours=fit.b10_hours)
        rows.append(row)
    columns = ["kind", "beta", "alpha", "b10_hours", "n_failures", "n_suspensions", "note"]
    return pd.DataFrame(rows, columns=columns).set_index("kind")


def per_pump(priors: pd.DataFrame, column: str, rows) -> np.ndarray:
    """A column of the priors (as floats) for each pump, by its kind's row (``rows``, kind_rows), NaN for -1 (as a
    reindex by the pumps' kinds gives it)."""
    rows = np.asarray(rows, dtype=np.int64)
    values = priors[column].to_numpy(dtype=float)
    if len(values) == 0:
        return np.full(len(rows), np.nan)
    return np.where(rows >= 0, values[np.maximum(rows, 0)], np.nan)


def overhaul_chances(age_hours, horizon_hours, rows, priors: pd.DataFrame) -> np.ndarray:
    """Each pump's chance of an interval reset within its horizon under its kind's fit (``rows``: kind_rows)."""
    return conditional_failure_probability(age_hours, horizon_hours, per_pump(priors, "beta", rows),
                                           per_pump(priors, "alpha", rows))


def sum_by_kind(chances, kind) -> pd.Series:
    """Per kind (sorted; pumps without a kind left out) the sum of its pumps' chances, NaN where none is known:
    pandas' grouped sum (min_count=1), in its own order of adding."""
    return pd.Series(chances).groupby(np.asarray(kind)).sum(min_count=1).rename("expected_overhauls")


def expected_overhauls(age_hours, horizon_hours, kind, priors: pd.DataFrame) -> pd.Series:
    """Expected number of interval resets per kind within the horizon: sum of conditional probabilities."""
    kind = np.asarray(kind)
    return sum_by_kind(overhaul_chances(age_hours, horizon_hours, kind_rows(priors, kind), priors), kind)


def kind_rows(priors: pd.DataFrame, kind) -> np.ndarray:
    """Each pump's kind as its position among the priors' rows, -1 for a kind they lack (as get_indexer gives it;
    by a dict for a few pumps, as get_indexer's fixed cost is most of it for one)."""
    kind = np.asarray(kind, dtype=object)
    index = priors.index
    if len(kind) > 32 or not index.is_unique or index.hasnans:
        return index.get_indexer(kind)
    position = {name: row for row, name in enumerate(index.tolist())}
    return np.array([position.get(name, -1) for name in kind.tolist()], dtype=np.intp)


def expected_overhauls_per_prior(age_hours, horizon_hours, kind, priors: pd.DataFrame, rows=None) -> np.ndarray:
    """expected_overhauls in the order of the priors' rows (NaN for a kind without pumps); ``rows``: kind_rows,
    when known. A lone pump's expected overhauls are its own chance, the sum of one value, taken as it is with no
    grouping made."""
    kind = np.asarray(kind, dtype=object)
    rows = kind_rows(priors, kind) if rows is None else rows
    chances = overhaul_chances(age_hours, horizon_hours, rows, priors)
    if len(kind) == 1:
        out = np.full(len(priors), np.nan)
        if rows[0] >= 0 and chances[0] == chances[0]:  # a missing chance sums to pandas' NaN
            out[rows[0]] = chances[0]
        return out
    return sum_by_kind(chances, kind).reindex(priors.index).to_numpy(dtype=float)
