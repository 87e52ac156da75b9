"""CI-sized honesty check of the chart design: false alarms over 20 declared seeds.

Each seed runs an in-control Beta(2,8) stream of 20,000 cases through an
upper chart designed (by the service's designer) for ARL0 = 2,000 cases and
restarted after every signal. A restarted chart is a renewal process, so the
count over all seeds is close to Poisson with mean 20 × 20,000 / 2,000 = 200
(run lengths are near geometric, docs/methods.md §18). The test asserts the count lies
inside the central 99.9 % Poisson interval for that mean (scipy.stats.poisson),
i.e. the design is neither optimistic nor wasteful beyond chance.

The weekly degradation rule (``tests.bench.weekly_rule``) is run the same way:
its in-control false alarms over 20 declared seeds stay within what its level
allows, and its delays after the benchmark's two shifts are finite and sane.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import expit, logit
from sklearn.metrics import log_loss
from tests.bench import weekly_rule
from tests.bench.alarms import count_signals, design

SEEDS = tuple(range(101, 121))  # 20 seeds, declared before the run
CASES = 20_000
ARL0 = 2_000.0


def test_false_alarms_stay_within_the_designed_poisson_bound() -> None:
    h = design(np.random.default_rng(7).beta(2, 8, 5000), 2.0, ARL0)
    total = 0
    for seed in SEEDS:
        rng = np.random.default_rng(seed)
        p = rng.beta(2, 8, CASES)
        y = (rng.random(CASES) < p).astype(float)
        total += count_signals(h, 2.0, p, y)
    mean = len(SEEDS) * CASES / ARL0
    lo, hi = stats.poisson.ppf([0.0005, 0.9995], mean)
    assert lo <= total <= hi, (total, mean, lo, hi)


WEEKLY_SEEDS = tuple(range(201, 221))  # 20 seeds, declared before the run
WEEKS_PER_SEED = 50
WEEKLY_VOLUME = 1_000


def test_weekly_rule_false_alarms_stay_within_its_level() -> None:
    """At most level × weeks in control; the bound is the binomial 99.9 % point (scipy.stats.binom)."""
    total = sum(weekly_rule.false_alarms(lambda g, n: g.beta(2, 8, n), np.random.default_rng(seed),
                                         WEEKS_PER_SEED, WEEKLY_VOLUME) for seed in WEEKLY_SEEDS)
    weeks = len(WEEKLY_SEEDS) * WEEKS_PER_SEED
    assert total <= stats.binom.ppf(0.999, weeks, weekly_rule.LEVEL), (total, weeks)


def test_week_sums_give_sklearn_log_loss() -> None:
    rng = np.random.default_rng(3)
    p = rng.beta(2, 8, 5000)
    y = (rng.random(p.size) < p).astype(float)
    sums = weekly_rule.week_sums(p, y)
    assert sums.sl / sums.n == pytest.approx(log_loss(y, p), rel=1e-12)  # source: scikit-learn log_loss
    assert sums.n1 == y.sum()


@pytest.mark.parametrize("shift", [lambda q: 2 * q / (1 + q), lambda q: expit(0.7 * logit(q))],
                         ids=["odds x2", "slope 0.7"])
def test_weekly_rule_delay_is_finite_and_within_the_horizon(shift) -> None:
    max_weeks = 20
    mean, missed = weekly_rule.delay(lambda g, n: g.beta(2, 8, n), shift, np.random.default_rng(9),
                                     runs=20, volume=WEEKLY_VOLUME, max_weeks=max_weeks)
    assert missed == 0  # Beta(2,8) at 1,000 cases a week: both shifts are found
    assert np.isfinite(mean)
    # at least one case after the change, at most the whole horizon
    assert 1 <= mean <= max_weeks * WEEKLY_VOLUME
