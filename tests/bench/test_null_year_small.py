"""CI size of tests/bench/null_year.py: the default rules' false alarms on calibrated years, and their power.

The small run simulates 12 well-calibrated model-years (two of each risk mix ×
outcome process) and 20 runs with the odds of a third of the traffic doubled,
through the rules' own decision code at the default budget of 1 false alarm a
year. The bounds are loose on purpose; why each can neither pass by accident
nor fail by noise is written beside it. The other tests check the bench's own
shortcuts against the service code they stand in for.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from scipy import stats
from tests.bench.null_year import POWER_WEEKS, Report, run_bench
from tests.bench.null_year_charts import DesignTable
from tests.bench.null_year_feed import feed_openings
from tests.bench.null_year_run import default_rules
from tests.bench.null_year_traffic import EXPLICIT, IMPLICIT, Cases, YearSpec, label_state, simulate
from tests.bench.null_year_window import DAY_ZERO, FAST_KEYS, SimModel, SimPeriod, references
from threadpoolctl import threadpool_limits

from calibrant.alarms import charts
from calibrant.alarms.kinds.calibration_chart import ChartParams
from calibrant.alarms.kinds.starvation import StarvationParams
from calibrant.stats.summary import Summary

SEED = 20290101  # declared before the run
YEARS = 12
RUNS = 20


@pytest.fixture(scope="module")
def report() -> Report:
    return run_bench(YEARS, RUNS, SEED, workers=min(2, os.cpu_count() or 1), odds_ratios=(2.0,))


def test_false_alarms_per_model_year_stay_below_three(report: Report) -> None:
    """Mean over 12 years < 3, i.e. fewer than 36 openings in all.

    Cannot fail by noise: at the goal of ≤ 1.3 a year the 12 years expect ≤ 15.6
    openings, and P(Poisson(15.6) ≥ 36) ≈ 1e-5 (scipy.stats.poisson; checked
    below); twice the Poisson variance for clustered alarms still leaves it
    below 1e-3. Cannot pass by accident: rules spending their share on every
    stream instead of dividing it (4 to 8 streams) would expect ≥ 4 a year, 48
    in all, and P(Poisson(48) < 36) ≈ 0.04.
    """
    assert stats.poisson.sf(35, 12 * 1.3) < 1e-4
    assert report.null is not None
    assert report.null.per_year.size == YEARS
    assert report.null.mean < 3.0, report.null.per_year


def test_an_odds_doubling_on_a_third_of_the_traffic_is_found_in_most_runs(report: Report) -> None:
    """At least 15 of 20 runs alarm within 12 weeks of the shift.

    Cannot fail by noise: the full run finds it in every run within 3 weeks,
    and even at a detection probability of 0.95, P(< 15 of 20) = 3e-4
    (scipy.stats.binom). Cannot pass by accident: no alarm at all on the
    affected streams would give 0 of 20, and the openings counted start at the
    shift (an alarm before it is not a detection).
    """
    assert stats.binom.cdf(14, RUNS, 0.95) < 1e-3
    power = report.power[2.0]
    assert power.runs == RUNS
    found = int(np.sum(np.isfinite(power.delays)))
    assert found >= 15, power.delays
    # a detection cannot come before the affected cases have matured (H + L after scoring)
    assert np.all(power.delays[np.isfinite(power.delays)] >= EXPLICIT.maturity_days)
    assert np.all(power.delays[np.isfinite(power.delays)] <= 7 * POWER_WEEKS)


@pytest.mark.parametrize("outcomes", [EXPLICIT, IMPLICIT], ids=["explicit", "implicit"])
def test_the_bench_computes_the_metrics_period_metrics_gives(outcomes) -> None:
    """The keys the bench computes alone equal ``rollup.query.period_metrics``'s (null_year_window)."""
    spec = YearSpec(mix="beta(1,20)", outcomes=outcomes, weekly_volume=1500.0, weeks=3)
    cases = simulate(spec, np.random.default_rng(5))
    model = SimModel(outcomes.implicit, outcomes.horizon_days, outcomes.lag_days)
    now = 21.0 + outcomes.maturity_days + 1.0
    ref = cases.take(np.flatnonzero(cases.scored < 7.0))
    ref_summary = Summary.from_arrays(ref.p, label_state(ref, now))
    refs = references(ref_summary, ref_summary, model)
    week = cases.take(np.flatnonzero(cases.scored >= 14.0))
    for segment in (0, 2):  # the largest and the smallest segment value
        idx = np.flatnonzero(week.segment == segment)
        summary = Summary.from_arrays(week.p[idx], label_state(week, now)[idx])
        period = SimPeriod(summary, 14.0, 21.0, model, refs)
        fast = {key: period.metric(key) for key in FAST_KEYS}
        full = period.all_metrics()
        for key in FAST_KEYS:
            assert fast[key] == full[key], key


def test_an_interpolated_design_is_the_direct_design() -> None:
    """h between two grid designs is within 0.01 of ``charts.design_for`` at that target itself."""
    table = DesignTable()
    params = ChartParams(odds_ratio=2.0)
    target = 3.0e5  # between the grid targets 2.56e5 and 1.024e6
    risks = table.sample("beta(2,8)", params.design_sample)
    times = np.arange(risks.size, dtype=np.float64) * 864.0
    share = charts.cases_per_day(times) * 365.25 / target
    with threadpool_limits(1):  # three Markov designs; many BLAS threads only slow them down
        direct = charts.design_for(np.vstack([risks, times]), params, 1, DAY_ZERO, share)["h"]
        interpolated = table.h("beta(2,8)", params, target)
    assert interpolated == pytest.approx(direct, abs=0.01)


def test_the_feed_harness_alarms_once_when_outcomes_stop() -> None:
    """Outcomes of cases scored from day 40 never arrive: the feed rule opens one alarm, after they mature."""
    spec = YearSpec(mix="beta(2,8)", outcomes=EXPLICIT, weekly_volume=2000.0, weeks=11,
                    seasonal_amplitude=0.0)
    cases = simulate(spec, np.random.default_rng(11))
    stopped = Cases(cases.scored, cases.version, cases.segment, cases.p, cases.y,
                    np.where(cases.scored >= 40.0, np.inf, cases.arrival))
    rule = next(r for r in default_rules(1.0) if r.kind == "starvation")
    assert rule.share is not None
    assert isinstance(rule.params, StarvationParams)
    level = rule.share / (24 * 365.25)
    healthy = feed_openings(rule.spec, rule.params, cases, EXPLICIT, level, 45.0, 75.0)
    opened = feed_openings(rule.spec, rule.params, stopped, EXPLICIT, level, 45.0, 75.0)
    assert healthy == []
    assert len(opened) == 1
    assert opened[0] >= 40.0 + EXPLICIT.maturity_days
