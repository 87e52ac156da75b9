"""Without a horizon a chart is fed the risk of a case *given it is labeled by its age*.

Events report after Gamma(2, scale 2) days, non-events after Gamma(3, scale 3.5) (slower):
at the ages a chart reads cases (around the p95 delay) the labeled cases lean towards
events. The truth here is a simulation of calibrated cases, not the code under test: among
the cases labeled by their age, the mean of the risk the chart is fed must match the
observed event rate (within 4 binomial SE), while the unadjusted p falls short of it. The
delay distributions are measured with the service's own estimator from a separate
simulated history, right-truncated as a live one is.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np

from calibrant.alarms.charts import Reading
from calibrant.rollup.outcome_delay import MAX_DELAY_DAYS, OutcomeDelay
from calibrant.stats.outcome_delay import right_truncated_cdf
from calibrant.store.tables import Model

NOW = datetime(2026, 6, 1, tzinfo=UTC)


def _delays(rng: np.random.Generator, y: np.ndarray) -> np.ndarray:
    return np.where(y == 1, rng.gamma(2.0, 2.0, y.size), rng.gamma(3.0, 3.5, y.size))


def _measured(rng: np.random.Generator) -> OutcomeDelay:
    n = 150_000
    waited = rng.uniform(0, 120, n)  # scored over the last 120 days
    y = (rng.random(n) < rng.beta(2, 8, n)).astype(int)
    d = _delays(rng, y)
    seen = d <= waited
    dist = {k: right_truncated_cdf(d[m], waited[m], max_days=MAX_DELAY_DAYS)
            for k, m in (("all", seen), ("events", seen & (y == 1)), ("non", seen & (y == 0)))}
    assert all(v is not None for v in dist.values())
    return OutcomeDelay(NOW, dist["all"], dist["events"], None, 0, [],  # type: ignore[arg-type]
                        non_events=dist["non"])


def test_fed_risk_matches_the_event_rate_of_the_cases_labeled_by_their_age() -> None:
    rng = np.random.default_rng(3)
    delay = _measured(rng)
    model = Model(name="slow", outcome_horizon_days=None, outcome_lag_days=0, implicit_negatives=False)
    reading = Reading.of(model, delay)
    assert reading.by_class is not None
    p95 = delay.reports.quantile(0.95)

    n = 300_000
    p = rng.beta(2, 8, n)
    y = (rng.random(n) < p).astype(int)
    age = rng.uniform(p95, p95 + 3.0, n)  # read just after they are complete
    labeled = _delays(rng, y) <= age
    matured = [NOW - timedelta(days=float(a) - 1 / 48) for a in age[labeled]]
    risk, shown = reading.risks(p[labeled], matured, NOW)

    observed = y[labeled].mean()
    se = np.sqrt(np.sum(risk * (1 - risk))) / labeled.sum()
    assert abs(risk.mean() - observed) < 4 * se
    assert observed - p[labeled].mean() > 6 * se  # unadjusted, the chart would see too many events
    assert shown.mean() > 0.94  # the reports' F̂ at these ages: about complete
    assert reading.evidence(shown)["risk_adjusted_for_delay"] is True


def test_one_class_with_too_few_reports_leaves_the_risk_as_it_is() -> None:
    rng = np.random.default_rng(4)
    delay = _measured(rng)
    few = right_truncated_cdf(np.array([1.0, 2.0, 3.0]), np.full(3, 50.0), max_days=MAX_DELAY_DAYS)
    thin = OutcomeDelay(NOW, delay.reports, delay.events, None, 0, [], non_events=few)
    model = Model(name="slow", outcome_horizon_days=None, outcome_lag_days=0, implicit_negatives=False)
    reading = Reading.of(model, thin)
    assert reading.by_class is None
    p = np.array([0.1, 0.3])
    risk, _ = reading.risks(p, [NOW - timedelta(days=20)] * 2, NOW)
    assert np.array_equal(risk, p)
