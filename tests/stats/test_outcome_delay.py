"""The right-truncated delay distribution (stats.outcome_delay) against statsmodels and the truth.

Right truncation (a delay D is seen only when D ≤ T) is left truncation in reversed
time: with D' = τ − D and entry τ − T, a case is seen only when D' ≥ its entry.
statsmodels' ``SurvfuncRight(time, status, entry=...)`` is the product-limit
estimator with delayed entry, so F̂(t) = P(D ≤ t) = P(D' ≥ τ − t) is its survival
just before τ − t. The two must agree to rounding.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.duration.survfunc import SurvfuncRight

from calibrant.stats.outcome_delay import right_truncated_cdf, right_truncated_cdf_steps


def _truncated_sample(seed: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    waited = rng.uniform(0, 60, n)  # days since scoring
    delay = rng.lognormal(np.log(5.0), 0.8, n)
    seen = delay <= waited
    return delay[seen], waited[seen]


def test_the_product_limit_steps_equal_statsmodels_with_entry_in_reversed_time() -> None:
    delay, waited = _truncated_sample(1, 5000)
    s, cdf = right_truncated_cdf_steps(delay, waited)
    tau = 100.0
    ref = SurvfuncRight(tau - delay, np.ones(delay.size), entry=tau - waited)
    for x in (0.5, 1, 2, 3, 5, 8, 13, 21, 34, 55):
        mine = cdf[np.searchsorted(s, x, side="right") - 1]
        k = np.searchsorted(ref.surv_times, tau - x, side="left") - 1  # survival just before τ − x
        theirs = ref.surv_prob[k] if k >= 0 else 1.0
        assert mine == pytest.approx(theirs, abs=1e-12), x


def test_the_estimate_recovers_the_true_distribution_where_a_plain_ecdf_is_too_short() -> None:
    delay, waited = _truncated_sample(2, 40_000)
    dist = right_truncated_cdf(delay, waited, max_days=60)
    assert dist is not None
    truth = stats.lognorm(0.8, scale=5.0)  # conditional on D ≤ 60, the longest look-back
    for q in (0.5, 0.9, 0.95):
        expected = truth.ppf(q * truth.cdf(60))
        assert dist.quantile(q) == pytest.approx(expected, rel=0.05), q
    # The plain quantile of the reported delays is pulled down by the cases still waiting.
    expected95 = truth.ppf(0.95 * truth.cdf(60))
    assert np.quantile(delay, 0.95) < 0.9 * expected95


def test_a_lone_or_empty_sample_is_handled() -> None:
    assert right_truncated_cdf(np.array([]), np.array([]), max_days=10) is None
    one = right_truncated_cdf(np.array([2.0]), np.array([5.0]), max_days=10)
    assert one is not None
    assert float(one.at(1.9)) == 0.0  # the grid is ~3.4 % wide here
    assert float(one.at(2.1)) == 1.0
    assert 1.9 <= one.quantile(0.5) <= 2.1
