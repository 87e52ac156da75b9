"""What ``GET /metrics`` reports, gathered in one read: per model and label set, the latest complete
period's figures, and the service's own health (webhook outbox, rollup backlog).

A period's figures come from ``metrics_service.metrics`` — the very call behind
``GET /v1/models/{model}/metrics`` — so a scraped log-loss is the API's log-loss
for the same period, segment and time, never a second computation.

Label sets: the whole model first, then each declared segment key's values in
the order they were first seen, at most ``Settings.metrics_label_sets`` (50 by
default) per model; how many were left out is reported too, so a cut is visible.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from calibrant.clock import rfc3339
from calibrant.models import isolation
from calibrant.rollup import metrics_service
from calibrant.rollup.periods import Granularity, Period, periods
from calibrant.store import alarm_repo, models_repo, outbox_repo, rollup_repo, scrape_repo
from calibrant.store.job_failures_repo import FailureRecord
from calibrant.store.outbox_repo import Backlog
from calibrant.store.scrape_repo import RollupBacklog
from calibrant.store.tables import Model
from calibrant.store.unit import Session
from calibrant.vocabulary.segments import ALL_SEGMENT


@dataclass(frozen=True, slots=True)
class LabelSetFigures:
    segment_key: str  # ALL_SEGMENT ("") for every case of the model
    segment_value: str
    period: dict[str, Any]  # one entry of the metrics API's ``periods``: counts, metrics, status


@dataclass(slots=True)
class ModelFigures:
    name: str
    period: Period  # the latest complete period, the one every label set reports
    label_sets: list[LabelSetFigures] = field(default_factory=list)
    label_sets_left_out: int = 0
    open_alarms: dict[str, int] = field(default_factory=dict)  # rule name -> open alarms
    predictions_stored: int = 0
    outcomes_stored: int = 0
    last_scored_at: datetime | None = None
    last_outcome_observed_at: datetime | None = None


@dataclass(frozen=True, slots=True)
class ScrapeFigures:
    now: datetime
    granularity: Granularity
    models: list[ModelFigures]
    outbox: Backlog
    rollup: RollupBacklog
    last_refresh_at: datetime | None
    job_failures: list[FailureRecord] = field(default_factory=list)  # models a job holds back


def latest_complete_period(now: datetime, granularity: Granularity) -> Period:
    """The last whole calendar period that ended at or before ``now`` (UTC)."""
    lookback = {Granularity.DAY: 2, Granularity.WEEK: 8, Granularity.MONTH: 32}[granularity]
    spans = periods(now - timedelta(days=2 * lookback), now, granularity)
    return [p for p in spans if p.end <= now][-1]


def label_sets(model: Model, values: dict[str, list[str]], cap: int) -> tuple[list[tuple[str, str]], int]:
    """The whole model, then each declared key's values; at most ``cap``, and how many were cut."""
    every = [(ALL_SEGMENT, ALL_SEGMENT)] + [
        (key, value) for key in (model.segment_keys or []) for value in values.get(key, [])
    ]
    return every[:cap], max(len(every) - cap, 0)


def gather(session: Session, *, now: datetime, granularity: Granularity, cap: int) -> ScrapeFigures:
    conn = session.connection()
    span = latest_complete_period(now, granularity)
    predictions, outcomes = scrape_repo.stored_counts(conn)
    last_outcome = scrape_repo.last_outcome_observed(conn)
    alarms = scrape_repo.open_alarms_by_rule(conn)
    versions = scrape_repo.known_versions(conn)
    models = []
    for model in models_repo.list_all(session):
        chosen, left_out = label_sets(model, rollup_repo.segment_values(conn, model.id), cap)
        figures = ModelFigures(
            name=model.name, period=span, label_sets_left_out=left_out,
            open_alarms=alarms.get(model.id, {}),
            predictions_stored=predictions.get(model.id, 0), outcomes_stored=outcomes.get(model.id, 0),
            last_scored_at=alarm_repo.last_scored_at(conn, model.id, versions.get(model.id, [])),
            last_outcome_observed_at=last_outcome.get(model.id),
        )
        for key, value in chosen:
            answer = metrics_service.metrics(
                session, model.name, start=rfc3339(span.start), end=rfc3339(span.end),
                granularity=granularity.value, window=None, version=None,
                tag=[] if key == ALL_SEGMENT else [f"{key}:{value}"], now=now,
            )
            (entry,) = answer["periods"]
            figures.label_sets.append(LabelSetFigures(key, value, entry))
        models.append(figures)
    return ScrapeFigures(
        now=now, granularity=granularity, models=models,
        outbox=outbox_repo.backlog(session, now), rollup=scrape_repo.rollup_backlog(conn),
        last_refresh_at=rollup_repo.last_job_run(conn, "refresh"),
        job_failures=isolation.failures(session),
    )
