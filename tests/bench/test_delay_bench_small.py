"""CI size of tests/bench/delay.py: late events, the charts and the completeness estimate.

Small and seeded (declared before the run). The bounds are loose on purpose: each
is far from what the code before the change gives (the full bench prints both).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from tests.bench.delay import (
    MODEL,
    NO_HORIZON_ARMS,
    H,
    L,
    chart_ratio,
    chart_ratio_no_horizon,
    history,
    measured,
    weeks_error,
)

from calibrant.rollup.outcome_delay import complete_after
from calibrant.stats.cusum import LOWER_ODDS_RATIO, UPPER_ODDS_RATIO

SEED = 20261203


def test_the_late_share_is_measured_within_003_of_the_simulated_share() -> None:
    for late in (0.0, 0.10):
        delay = measured(history(np.random.default_rng([SEED, int(late * 100)]), late))
        assert delay.late_event_share is not None
        assert abs(delay.late_event_share - late) <= 0.03
        assert math.isfinite(delay.reports.quantile(0.95))


def test_with_10_percent_late_events_the_lower_chart_stays_near_its_design() -> None:
    # 2 seeds × 40,000 cases at ARL0 2,000: about 40 signals on design (Poisson sd ~6.3);
    # the code before the change gives ~2.6 × design (the full bench), ~104 signals.
    before, _ = chart_ratio(LOWER_ODDS_RATIO, 0.10, False, 2, 40_000, SEED)
    after, share = chart_ratio(LOWER_ODDS_RATIO, 0.10, True, 2, 40_000, SEED)
    assert before > 1.8
    assert after < 1.5
    assert share == pytest.approx(0.10, abs=0.03)


@pytest.mark.parametrize("implicit", [True, False])
def test_recent_weeks_completeness_is_within_010_of_the_truth(implicit: bool) -> None:
    pairs = weeks_error(np.random.default_rng([SEED, int(implicit)]), implicit=implicit, late_share=0.10)
    assert min(t for _, t in pairs) < 0.7  # the most recent week really is incomplete
    for estimate, truth in pairs:
        assert abs(estimate - truth) <= 0.10


def test_the_bench_model_waits_past_horizon_and_lag_only_when_late_events_are_common() -> None:
    on_time = measured(history(np.random.default_rng([SEED, 7]), 0.0))
    late = measured(history(np.random.default_rng([SEED, 8]), 0.10))
    assert complete_after(MODEL, on_time).days == H + L  # type: ignore[union-attr]
    assert complete_after(MODEL, late).total_seconds() > (H + L) * 86400  # type: ignore[union-attr]


def test_without_a_horizon_the_adjusted_upper_chart_stays_near_its_design() -> None:
    # Non-events report later: read at the p95 age as they are, the labels lean towards events
    # and the upper chart raises ~1.65 × its design (3 seeds × 20,000 cases, the bench's C);
    # fed the risk given a label by the age, ~1.1 ×. 3 seeds × 20,000 cases: ~30 signals on design.
    as_is = chart_ratio_no_horizon(UPPER_ODDS_RATIO, NO_HORIZON_ARMS[1], 3, 20_000, SEED)
    adjusted = chart_ratio_no_horizon(UPPER_ODDS_RATIO, NO_HORIZON_ARMS[2], 3, 20_000, SEED)
    assert as_is > 1.4
    assert adjusted < 1.35
