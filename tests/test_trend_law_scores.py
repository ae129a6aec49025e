"""The laws' AICc scores of every law at once (wear_laws._law_scores) against the one-law-at-a-time code they
replaced, kept here as the reference: AICc = n ln(D / n) + 2K + 2K(K + 1) / (n - K - 1) (Burnham & Anderson 2002,
sec. 2.4) on each law's best member; equal to the last bit, NaN where it was NaN."""

import numpy as np
import pytest

from fleet.trend.wear_laws import LAW_PARAMS, LAWS, MEMBERS, _law_scores, aicc


def _law_aicc(law: str, count, deviance) -> np.ndarray:
    """AICc of a law on its best member's deviance (NaN where no member is usable): the code before."""
    of_law = np.array([m.law == law for m in MEMBERS])
    best = np.min(np.where(np.isfinite(deviance[:, of_law]), deviance[:, of_law], np.inf), axis=1)
    return aicc(count, LAW_PARAMS[law], np.where(np.isfinite(best), best, np.nan))


@pytest.mark.parametrize("seed", range(6))
def test_every_law_at_once_equals_one_law_at_a_time(seed):
    rng = np.random.default_rng(seed)
    n_groups = int(rng.integers(1, 200))
    count = rng.integers(0, 40, n_groups).astype(float)  # some too few for any law (n <= K + 1)
    deviance = rng.lognormal(0.0, 3.0, (n_groups, len(MEMBERS))) * count[:, None]
    deviance[rng.random(deviance.shape) < 0.3] = np.nan  # members not usable
    deviance[rng.random(n_groups) < 0.1] = np.nan  # a group with no usable member
    deviance[rng.random(deviance.shape) < 0.02] = 0.0  # a perfect fit: not scored
    ours = _law_scores(count, deviance)
    ref = np.column_stack([_law_aicc(law, count, deviance) for law in LAWS])
    np.testing.assert_array_equal(ours, ref)
    assert np.isfinite(ref).any() and np.isnan(ref).any()
