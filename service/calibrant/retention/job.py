"""The retention job: remove raw rows past each model's retention, in bounded batches, keeping
the summaries; then delivered webhook rows and audit events past the instance's settings.

Per model: advance the model's boundary (``models.pruned_before``, a UTC midnight) to
``retention_days`` before today, never past an hour that still waits for its recomputation
(``store.retention_repo.advance``); then remove, ``batch_rows`` at a time and one short
transaction each, predictions scored before the boundary and the outcomes (with their label
history) observed before it whose case has no prediction left. The hourly and daily summaries
stay, so metrics over old periods still answer. Every run that removed something says so in
the log and in the audit trail (actor ``RETENTION_ACTOR``), and is recorded in ``job_runs``.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from calibrant.clock import Clock
from calibrant.config import Settings
from calibrant.models.isolation import ModelGuard
from calibrant.store import audit, retention_repo, rollup_repo
from calibrant.store.engine import make_session_factory
from calibrant.store.unit import Connection, Engine, SessionFactory

JOB_NAME = "retention"
RETENTION_ACTOR = "(retention job)"
log = logging.getLogger("calibrant.retention")


@dataclass
class ModelPruned:
    name: str
    pruned_before: datetime
    predictions: int = 0
    outcomes: int = 0
    outcome_revisions: int = 0

    @property
    def removed(self) -> int:
        return self.predictions + self.outcomes + self.outcome_revisions


@dataclass
class RetentionReport:
    """What one run removed."""

    models: list[ModelPruned] = field(default_factory=list)
    sealed: int = 0  # boundaries advanced
    deliveries: int = 0
    events: int = 0
    audit_events: int = 0

    def as_dict(self) -> dict[str, int]:
        return {
            "sealed": self.sealed,
            "predictions": sum(m.predictions for m in self.models),
            "outcomes": sum(m.outcomes for m in self.models),
            "outcome_revisions": sum(m.outcome_revisions for m in self.models),
            "deliveries": self.deliveries,
            "events": self.events,
            "audit_events": self.audit_events,
        }


def apply_retention(engine: Engine, clock: Clock, settings: Settings, *, worker: str,
                    batch_rows: int | None = None, guard: ModelGuard | None = None) -> RetentionReport:
    """One pass over every model with retention, then the instance's outbox and audit retention.

    A model whose pruning raises is recorded and held back by ``guard`` (``models.isolation``);
    the models after it are still pruned.
    """
    guard = guard or ModelGuard(engine, clock, JOB_NAME)
    limit = batch_rows or settings.retention_batch_rows
    sessions = make_session_factory(engine)
    report = RetentionReport()
    started = clock.now()
    with engine.begin() as conn:
        models = retention_repo.models_to_visit(conn)
    for model in models:
        if guard.allows(model.model_id):
            with guard.unit(model.model_id):
                _prune_model(engine, sessions, clock, model, limit, report)
    if settings.webhook_retention_days is not None:
        before = clock.now() - timedelta(days=settings.webhook_retention_days)
        report.deliveries, report.events = _until_done(
            engine, lambda conn: retention_repo.delete_delivered(conn, before, limit))
        _audit_instance(sessions, clock, "webhook deliveries", before,
                        {"deliveries": report.deliveries, "events": report.events})
    if settings.audit_retention_days is not None:
        before = clock.now() - timedelta(days=settings.audit_retention_days)
        (report.audit_events,) = _until_done(
            engine, lambda conn: (retention_repo.delete_audit(conn, before, limit),))
        _audit_instance(sessions, clock, "audit events", before, {"audit_events": report.audit_events})
    removed = sum(report.as_dict().values()) - report.sealed
    with engine.begin() as conn:
        rollup_repo.record_job_run(conn, JOB_NAME, worker, started, clock.now(), len(report.models), removed)
    return report


def _prune_model(engine: Engine, sessions: SessionFactory, clock: Clock, model: retention_repo.Retained,
                 limit: int, report: RetentionReport) -> None:
    boundary = model.pruned_before
    if model.retention_days is not None:
        with engine.begin() as conn:
            advanced = retention_repo.advance(conn, model.model_id, clock.now())
        if advanced is not None:
            report.sealed += 1
            boundary = advanced.sealed_before
            log.info("retention: model %s sealed before %s (settings generation %d)", model.name,
                     boundary.isoformat(), advanced.settings_generation)
    if boundary is None:
        return
    done = ModelPruned(model.name, boundary)
    (done.predictions,) = _until_done(
        engine, lambda conn: (retention_repo.delete_predictions(conn, model.model_id, boundary, limit),))
    done.outcomes, done.outcome_revisions = _until_done(
        engine, lambda conn: retention_repo.delete_outcomes(conn, model.model_id, boundary, limit))
    if not done.removed:
        return
    report.models.append(done)
    detail = {"pruned_before": boundary.isoformat(), "predictions": done.predictions,
              "outcomes": done.outcomes, "outcome_revisions": done.outcome_revisions}
    log.info("retention: model %s removed %s", model.name, detail)
    with sessions.begin() as session:
        audit.record(session, at=clock.now(), actor=RETENTION_ACTOR, action="retention.pruned",
                     target=model.name, detail=detail, model_id=model.model_id)


def _until_done(engine: Engine, batch: Callable[[Connection], tuple[int, ...]]) -> tuple[int, ...]:
    """Run ``batch`` in its own transaction until it removes nothing; the summed counts."""
    totals: list[int] = []
    while True:
        with engine.begin() as conn:
            counts = batch(conn)
        totals = [a + b for a, b in zip(totals, counts, strict=True)] if totals else list(counts)
        if not any(counts):
            return tuple(totals)


def _audit_instance(sessions: SessionFactory, clock: Clock, what: str, before: datetime,
                    counts: dict[str, Any]) -> None:
    if not any(counts.values()):
        return
    detail = {"removed_before": before.isoformat(), **counts}
    log.info("retention: %s removed %s", what, detail)
    with sessions.begin() as session:
        audit.record(session, at=clock.now(), actor=RETENTION_ACTOR, action="retention.pruned",
                     target=what, detail=detail)
