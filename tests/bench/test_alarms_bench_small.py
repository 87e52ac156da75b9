"""CI-sized honesty check of the chart design: false alarms over 20 declared seeds.

Each seed runs an in-control Beta(2,8) stream of 20,000 cases through an
upper chart designed (by the service's designer) for ARL0 = 2,000 cases and
restarted after every signal. A restarted chart is a renewal process, so the
count over all seeds is close to Poisson with mean 20 × 20,000 / 2,000 = 200
(run lengths are near geometric, METHODS 7.1). The test asserts the count lies
inside the central 99.9 % Poisson interval for that mean (scipy.stats.poisson),
i.e. the design is neither optimistic nor wasteful beyond chance.
"""

from __future__ import annotations

import numpy as np
from scipy import stats
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
