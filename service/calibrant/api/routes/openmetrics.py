"""``GET /metrics``: the figures a metrics-and-alerting stack scrapes, in the OpenMetrics text format.

The text is produced by ``prometheus_client`` (its OpenMetrics exposition), not
by hand: escaping, ``# EOF``, ``_total`` on counters and unit suffixes are the
library's. Every scrape builds a fresh registry holding one collector over one
consistent read (``rollup.scrape.gather``); nothing is kept between scrapes,
so several workers answer alike.

Names follow the format's conventions: ``_seconds`` and ``_ratio`` units, counters
ending in ``_total``, times as Unix timestamps (``_timestamp_seconds``). A figure
the period cannot measure (too few labeled cases) has no sample, rather than NaN.
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import datetime

from fastapi import APIRouter, Response
from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily, Metric
from prometheus_client.openmetrics.exposition import CONTENT_TYPE_LATEST, generate_latest
from prometheus_client.registry import Collector, CollectorRegistry

from calibrant.api.deps import Reader, RuntimeDep
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.rollup import scrape
from calibrant.rollup.periods import Granularity
from calibrant.rollup.scrape import ModelFigures, ScrapeFigures

router = APIRouter(tags=["health"])

SEGMENT_LABELS = ["model", "segment_key", "segment_value"]

# (key of a period in the metrics API, exposed name, unit, help). The one list of per-period figures:
# a figure the metrics API gains (e.g. label completeness) is exposed by adding its line here.
PERIOD_FIGURES: tuple[tuple[str, str, str, str], ...] = (
    ("log_loss", "calibrant_log_loss", "",
     "Log-loss (mean negative log-likelihood, nats) of labeled cases"),
    ("brier", "calibrant_brier_score", "",
     "Brier score (mean squared error of the probability)"),
    ("calibration_intercept", "calibrant_calibration_intercept", "",
     "Calibration intercept (calibration-in-the-large, logit scale); 0 is ideal"),
    ("calibration_slope", "calibrant_calibration_slope", "",
     "Calibration slope (logistic recalibration); 1 is ideal"),
    ("oe_ratio", "calibrant_observed_expected", "ratio",
     "Observed over expected positives (O/E); 1 is ideal"),
    ("label_coverage", "calibrant_label_coverage", "ratio",
     "Labeled share of the period's predictions (n_labeled / n_predictions)"),
    ("label_completeness", "calibrant_label_completeness", "ratio",
     "Estimated share of the period's eventual outcomes already reported (measured outcome delay)"),
    ("n_predictions", "calibrant_period_predictions", "",
     "Predictions scored in the period"),
    ("n_labeled", "calibrant_period_labeled_cases", "",
     "Labeled mature cases the period's metrics use"),
)


class ScrapeCollector(Collector):
    """Turns one ``ScrapeFigures`` into metric families."""

    def __init__(self, figures: ScrapeFigures) -> None:
        self.figures = figures

    def collect(self) -> Iterator[Metric]:
        yield from self._periods()
        yield from self._models()
        yield from self._service()

    def _periods(self) -> Iterator[Metric]:
        models = self.figures.models
        for key, name, unit, help_text in PERIOD_FIGURES:
            family = GaugeMetricFamily(
                name, f"{help_text}; latest complete {self.figures.granularity.value} (UTC), per model "
                "and segment (empty segment labels: every case)", labels=SEGMENT_LABELS, unit=unit,
            )
            for model in models:
                for label_set in model.label_sets:
                    value = label_set.period.get(key)
                    if value is not None:
                        family.add_metric([model.name, label_set.segment_key, label_set.segment_value],
                                          float(value))
            yield family
        start = GaugeMetricFamily("calibrant_period_start_timestamp", "Start of the period the figures "
                                  "describe", labels=["model", "granularity"], unit="seconds")
        end = GaugeMetricFamily("calibrant_period_end_timestamp", "End (exclusive) of that period",
                                labels=["model", "granularity"], unit="seconds")
        left_out = GaugeMetricFamily("calibrant_label_sets_left_out", "Segment values not shown because "
                                     "the model reached CALIBRANT_METRICS_LABEL_SETS", labels=["model"])
        for model in models:
            grain = self.figures.granularity.value
            start.add_metric([model.name, grain], model.period.start.timestamp())
            end.add_metric([model.name, grain], model.period.end.timestamp())
            left_out.add_metric([model.name], model.label_sets_left_out)
        yield from (start, end, left_out)

    def _models(self) -> Iterator[Metric]:
        now = self.figures.now
        alarms = GaugeMetricFamily("calibrant_open_alarms", "Open alarms per rule", labels=["model", "rule"])
        predictions = CounterMetricFamily("calibrant_predictions_stored", "Predictions stored",
                                          labels=["model"])
        outcomes = CounterMetricFamily("calibrant_outcomes_stored", "Outcomes stored (one per case; "
                                       "corrections replace)", labels=["model"])
        scored = GaugeMetricFamily("calibrant_feed_last_scored_timestamp", "Latest scored_at of a "
                                   "prediction", labels=["model"], unit="seconds")
        scored_age = GaugeMetricFamily("calibrant_feed_last_scored_age", "Time since the latest scored_at",
                                       labels=["model"], unit="seconds")
        observed = GaugeMetricFamily("calibrant_feed_last_outcome_timestamp", "Latest time an outcome was "
                                     "first observed", labels=["model"], unit="seconds")
        observed_age = GaugeMetricFamily("calibrant_feed_last_outcome_age", "Time since the latest outcome "
                                         "was first observed", labels=["model"], unit="seconds")
        for model in self.figures.models:
            for rule, count in sorted(model.open_alarms.items()):
                alarms.add_metric([model.name, rule], count)
            predictions.add_metric([model.name], model.predictions_stored)
            outcomes.add_metric([model.name], model.outcomes_stored)
            _add_time(scored, scored_age, model, model.last_scored_at, now)
            _add_time(observed, observed_age, model, model.last_outcome_observed_at, now)
        yield from (alarms, predictions, outcomes, scored, scored_age, observed, observed_age)

    def _service(self) -> Iterator[Metric]:
        f = self.figures
        yield GaugeMetricFamily("calibrant_webhook_outbox_pending", "Webhook deliveries not yet delivered "
                                "or given up", value=f.outbox.pending)
        yield GaugeMetricFamily("calibrant_webhook_outbox_due", "Pending deliveries whose next attempt is "
                                "due now", value=f.outbox.due)
        oldest = f.outbox.oldest_pending_at
        yield GaugeMetricFamily("calibrant_webhook_outbox_oldest_pending_age", "Age of the oldest pending "
                                "delivery (0: none)", unit="seconds",
                                value=0.0 if oldest is None else max((f.now - oldest).total_seconds(), 0.0))
        yield GaugeMetricFamily("calibrant_rollup_dirty_hours", "Hour buckets waiting for the refresh",
                                value=f.rollup.hours)
        yield GaugeMetricFamily("calibrant_rollup_dirty_days", "Days waiting for their merge",
                                value=f.rollup.days)
        marked = f.rollup.oldest_marked_at
        yield GaugeMetricFamily("calibrant_refresh_lag", "How long the longest-waiting change has waited "
                                "for the refresh (0: nothing waits)", unit="seconds",
                                value=0.0 if marked is None else max((f.now - marked).total_seconds(), 0.0))
        last = GaugeMetricFamily("calibrant_refresh_last_run_timestamp", "End of the latest refresh run",
                                 unit="seconds")
        if f.last_refresh_at is not None:
            last.add_metric([], f.last_refresh_at.timestamp())
        yield last
        failed = GaugeMetricFamily("calibrant_job_failed_attempts", "Consecutive failed attempts of a job on "
                                   "a model (no sample: the job processes the model)",
                                   labels=["model", "job"])
        quarantined = GaugeMetricFamily("calibrant_job_quarantined", "1 while a job skips a model until an "
                                        "admin resumes it", labels=["model", "job"])
        for record in f.job_failures:
            failed.add_metric([record.model, record.job], record.attempts)
            quarantined.add_metric([record.model, record.job], 1 if record.quarantined else 0)
        yield from (failed, quarantined)


def _add_time(at: GaugeMetricFamily, age: GaugeMetricFamily, model: ModelFigures, when: datetime | None,
              now: datetime) -> None:
    if when is not None:
        at.add_metric([model.name], when.timestamp())
        age.add_metric([model.name], max((now - when).total_seconds(), 0.0))


def render(figures: ScrapeFigures) -> bytes:
    registry = CollectorRegistry(auto_describe=False)
    registry.register(ScrapeCollector(figures))
    return generate_latest(registry)


@router.get(
    "/metrics",
    response_class=Response,
    responses={
        **PROBLEM_RESPONSES,
        200: {"description": "OpenMetrics text",
              "content": {CONTENT_TYPE_LATEST: {"schema": {"type": "string"}}}},
    },
    summary="Calibration figures and service health in the OpenMetrics text format, for scrapers",
)
async def get_openmetrics(runtime: RuntimeDep, _caller: Reader) -> Response:
    settings = runtime.settings
    figures = await runtime.run(
        lambda session: scrape.gather(
            session, now=runtime.clock.now(), granularity=Granularity(settings.metrics_granularity),
            cap=settings.metrics_label_sets,
        )
    )
    return Response(render(figures), media_type=CONTENT_TYPE_LATEST)
