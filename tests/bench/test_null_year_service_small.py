"""CI size of tests/bench/null_year_service.py: a calibrated quarter-year through the running service.

One model (8 reference weeks, then 13 judged weeks of 500 cases a week,
Beta(2,8) risks, explicit outcomes inside the horizon, every default rule
enabled at the default budget of 1 false alarm a year) is posted day by day
through ``create_app`` with a ``FixedClock`` and refreshed weekly on the day
its weeks fall due; the same arrays go through the bench's decision path
(``null_year_run.run`` and ``null_year_service.WeekJudge``). A whole year
takes about two minutes of CPU through the service even at this volume (its
rollup recomputes every hour that receives outcomes), which is why CI runs a
quarter (~35 s); the full bench runs whole years.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from tests.bench.null_year_run import default_rules
from tests.bench.null_year_service import (
    IMPLICIT,
    INSIDE,
    REPLAY_BUDGET,
    SMALL,
    WeekJudge,
    YearResult,
    refresh_days,
    run_year,
    years_of,
)
from tests.bench.null_year_traffic import Outcomes, simulate

from calibrant.alarms.kinds import DEFAULT_RULES

SEED = 20290314  # declared before the run


@pytest.fixture(scope="module")
def result() -> YearResult:
    return run_year(years_of(1, SEED, small=True)[0], "weekly")


def test_window_openings_agree_exactly_with_the_bench(result: YearResult) -> None:
    """Same rule, version, segment and week on both sides; each service opening at the bench's level
    and statistic (there may be none: the rules open ~0.4 window alarms a year at this budget)."""
    assert result.window_disagreements() == (set(), set())
    assert result.notes == []


def test_replayed_window_crossings_agree_exactly_and_are_many(result: YearResult) -> None:
    """The backtests at a raised budget with the effect floors lowered cross on the very stream-weeks
    the kinds' ``decide`` crosses on ``Summary.from_arrays`` of the same cases, at the same level and
    statistic.

    Not empty by luck: excess log-loss alone is tested on 13 weeks × 4 streams (the smallest
    segment, 1/6 of 500 cases a week, is above the replay's 50 labeled cases) at level
    share / (365.25 / 7) / 4 with share = 200 × 2/9 (``alarms.budget.split``), α ≈ 0.21; if its
    test holds its level the count is Binomial(52, 0.21), mean 11, and P(fewer than 3) < 0.001
    (scipy.stats.binom, checked below). The seed is fixed, so the run itself cannot flake.
    """
    alpha = REPLAY_BUDGET * 2.0 / 9.0 / (365.25 / 7.0) / 4.0
    assert stats.binom.cdf(2, 52, alpha) < 1e-3
    assert result.replay_disagreements() == (set(), set())
    assert result.notes == []
    assert len(result.service.replayed) >= 3
    assert all(o.level is not None and o.statistic is not None for o in result.service.replayed)


def test_the_quarter_opens_few_alarms(result: YearResult) -> None:
    """At most 2 openings in the 13 judged weeks, all rules together.

    The goal of null_year.py is ≤ 1.3 false alarms a model-year, 0.33 for a quarter;
    P(Poisson(0.33) ≥ 3) ≈ 0.004 (scipy.stats.poisson). A service spending the rules' whole
    shares on every one of its 4 streams (no division) would expect about 4 × 0.33 = 1.3 and
    exceed 2 with probability 0.14: this bound cannot tell those apart, and is not meant to;
    the exact agreement above tests the levels.
    """
    assert stats.poisson.sf(2, 1.3 * 13 / 52) < 0.005
    assert len(result.service_openings()) <= 2, result.service_openings()


def test_the_service_ran_the_default_rules_at_the_bench_shares(result: YearResult) -> None:
    rules = {r["name"]: r for r in result.service.rules}
    assert set(rules) == {name for name, _, _ in DEFAULT_RULES}
    assert all(r["enabled"] for r in rules.values())
    shares = {s["rule"]: s["share_per_year"] for s in result.service.budget["rules"]}
    for rule in default_rules(1.0):
        assert rule.share is not None
        assert shares[rule.name] == pytest.approx(rule.share, rel=1e-12)


def test_every_case_outcome_and_week_reached_the_service(result: YearResult) -> None:
    """All cases scored and outcomes arrived by the last step were posted; every week of the
    reference and of the quarter was judged by each of the three window rules; each chart alarm
    was resolved by the person the next day (the last refresh's may still be open)."""
    year = result.year
    cases = simulate(year.spec, np.random.default_rng(year.seed))
    last = result.service.replayed_at
    assert result.service.posted_predictions == int(np.sum(cases.scored < last))
    assert result.service.posted_outcomes == int(np.sum(cases.arrival <= last))
    weeks = year.timeline.reference_weeks + year.timeline.judged_weeks
    assert result.service.jobs["periods"] == 3 * weeks
    charts = [o for o in result.service.openings if o.rule.startswith("calibration-chart")]
    assert len(charts) - 1 <= result.service.resolved_by_person <= len(charts)


@pytest.mark.parametrize("outcomes", [INSIDE, IMPLICIT], ids=["explicit", "implicit"])
def test_each_week_falls_due_on_a_weekly_refresh(outcomes: Outcomes) -> None:
    """A week is judged at the first refresh after its end + H + L: the weekly cadence refreshes at
    01:00 of that very day, the moment WeekJudge.due gives and null_year_run judges it."""
    last = int(SMALL.end + outcomes.maturity_days)
    days = refresh_days(outcomes, "weekly", last)
    cases = simulate(years_of(1, SEED, small=True)[0].spec, np.random.default_rng(0))
    judge = WeekJudge(cases, outcomes, SMALL)
    for week in range(SMALL.reference_weeks + SMALL.judged_weeks):
        due = judge.due(week)
        assert due - int(due) == pytest.approx(1 / 24)
        assert int(due) in days
        earlier = [d for d in days if d < int(due)]  # none of them finds the week ready yet
        assert not earlier or max(earlier) + 1 / 24 <= 7 * (week + 1) + outcomes.maturity_days
