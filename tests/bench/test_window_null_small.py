"""CI-sized run of the window tests' null benchmark (``tests.bench.window_null --small``).

Every period is drawn under the null, so each count of rejections is binomial
with the test's true rejection rate. The bounds are the central 99.9 % binomial
interval (``scipy.stats.binom``) around a band of true rates that an honest test
meets: level × [0.75, 1.25] at level 0.01, × [0.5, 1.5] for the excess log-loss
tail at 1e-4 (the full run gives 0.99-1.12 × and 0.81-1.17 ×), and at most 3 ×
for PSI at 1e-4, whose χ² point is a second-order approximation (full run:
0.95-1.45 ×); the calibration-slope rule at most at its level. The benchmark
itself asserts that its fast paths equal the service's own code on the first
periods of every cell.
"""

from __future__ import annotations

import pytest
from scipy import stats
from tests.bench import window_null
from tests.bench.window_null import LEVEL, SMALL, SMALL_LEVEL, Cell, Count


@pytest.fixture(scope="module")
def cells() -> list[Cell]:
    return window_null.run(SMALL, workers=1)


def _pooled(cells: list[Cell], test: str, name: str) -> Count:
    counts = [c.figures[name] for c in cells if c.test == test]
    parts = [c for c in counts if isinstance(c, Count)]
    assert len(parts) == len(counts) == 6
    return Count(sum(c.k for c in parts), sum(c.n for c in parts))


def _within(count: Count, low_rate: float, high_rate: float) -> bool:
    low = stats.binom.ppf(0.0005, count.n, low_rate)
    high = stats.binom.ppf(0.9995, count.n, high_rate)
    return bool(low <= count.k <= high)


def test_excess_log_loss_rejects_at_its_level_per_period(cells: list[Cell]) -> None:
    count = _pooled(cells, "excess", "saddlepoint per period")
    assert _within(count, 0.75 * LEVEL, 1.25 * LEVEL), count


def test_only_the_floor_on_events_leaves_periods_unjudged(cells: list[Cell]) -> None:
    # Beta(1, 20) risks drawn independently make the number of events Binomial(n, 1/21);
    # the floor asks for 10, so the share judged is its survival function at 9 (scipy).
    for cell in (c for c in cells if c.test == "excess"):
        evaluated = cell.figures["evaluated"]
        assert isinstance(evaluated, Count)
        if cell.mix == "Beta(1,20)" and cell.n == 200:
            share = float(stats.binom.sf(9, 200, 1 / 21))
            assert _within(evaluated, share, share), evaluated
        else:
            assert evaluated.k == evaluated.n


def test_excess_log_loss_saddlepoint_tail_holds_at_1e4_and_the_normal_one_does_not(cells: list[Cell]) -> None:
    assert _within(_pooled(cells, "excess 1e-4", "saddlepoint"), 0.5 * SMALL_LEVEL, 1.5 * SMALL_LEVEL)
    rare = next(c for c in cells if c.test == "excess 1e-4" and c.mix == "Beta(1,20)" and c.n == 200)
    normal = rare.figures["normal z"]
    assert isinstance(normal, Count)
    # Rare events: the normal critical value is passed far more often than 1e-4 (full run: 6.8 ×).
    assert normal.k > stats.binom.ppf(0.9995, normal.n, 2 * SMALL_LEVEL), normal


def test_psi_no_shift_point_rejects_at_its_level(cells: list[Cell]) -> None:
    assert _within(_pooled(cells, f"psi {LEVEL:g}", "test"), 0.75 * LEVEL, 1.25 * LEVEL)
    small = _pooled(cells, f"psi {SMALL_LEVEL:g}", "test")
    assert small.k <= stats.binom.ppf(0.9995, small.n, 3 * SMALL_LEVEL), small


def test_calibration_slope_rule_holds_its_level(cells: list[Cell]) -> None:
    # The rule needs both Wald tests to reject, so it cannot reject more often than the plain test;
    # the full run gives the rule 0.50-0.73 × the level and the plain test 0.80-1.02 ×.
    rule = _pooled(cells, "slope", "rule")
    assert rule.k <= stats.binom.ppf(0.9995, rule.n, LEVEL), rule
    assert _within(_pooled(cells, "slope", "plain Wald"), 0.5 * LEVEL, 1.5 * LEVEL)
