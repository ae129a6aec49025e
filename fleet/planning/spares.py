"""How many spare pumps of one kind to hold: the count of overhauls the fleet history expects in a horizon.

Each pump has its own chance of needing an overhaul in the horizon (Weibull, conditional on its age), so the
number of overhauls follows a Poisson-binomial distribution; the spares to hold is the smallest stock that
covers that number with the chosen probability. Pure numbers: no database, no web.
"""

import numpy as np

DEFAULT_COVER = 0.90  # our choice: run out of spares in at most one horizon out of ten


def demand_distribution(probabilities) -> np.ndarray:
    """P(exactly k overhauls), k = 0..n, for independent pumps with these overhaul probabilities.

    Unknown probabilities (NaN) are left out: a pump without a fleet prior adds no expected demand.
    """
    p = np.asarray(probabilities, dtype=float)
    p = np.clip(p[np.isfinite(p)], 0.0, 1.0)
    pmf = np.array([1.0])
    for chance in p:  # one convolution per pump of the kind; a kind has tens of pumps, not thousands
        pmf = np.convolve(pmf, [1.0 - chance, chance])
    return pmf


def spares_to_hold(probabilities, cover: float = DEFAULT_COVER) -> int:
    """Smallest stock k with P(overhauls <= k) >= cover."""
    if not 0.0 < cover < 1.0:
        raise ValueError("cover must lie strictly between 0 and 1")
    cdf = np.cumsum(demand_distribution(probabilities))
    # A hair of tolerance so a cdf that reaches the cover exactly is not lost to rounding.
    return int(np.argmax(cdf >= cover - 1e-12))
