"""All SQL of retention: the sealed boundary of a model, and bounded deletes of old rows.

Every delete removes at most ``limit`` rows in its own short transaction (the caller loops),
so no statement holds locks on a large range and ingest keeps flowing between batches.

The boundary (``models.pruned_before``) is advanced under the model's row lock (FOR UPDATE),
which conflicts with the lock ingest takes before it reads the boundary (``boundary_for_ingest``):
an ingest either commits before the advance, and its dirty marks then hold the boundary back, or
waits and sees the new boundary. The boundary never passes an hour that still waits for its
recomputation, so every raw row removed has been summarised. (SQLite: every transaction holds
the single write lock, which serialises the same way.)
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import Connection, delete, func, insert, select, update

from calibrant.store.dirty import day_of
from calibrant.store.retention_tables import RetentionSeal
from calibrant.store.rollup_tables import DirtyBucket
from calibrant.store.tables import AuditEvent, Model, Outcome, OutcomeRevision, Prediction
from calibrant.store.webhook_tables import DELIVERED, OutboxEvent, WebhookAttempt, WebhookDelivery


@dataclass(frozen=True, slots=True)
class Retained:
    """A model with a retention setting or a boundary, as read without a lock."""

    model_id: int
    name: str
    retention_days: int | None
    pruned_before: datetime | None


def models_to_visit(conn: Connection) -> list[Retained]:
    """Models with a retention setting, and models with a boundary whose setting was since
    cleared (rows an interrupted run left below the boundary are still removed)."""
    rows = conn.execute(
        select(Model.id, Model.name, Model.retention_days, Model.pruned_before)
        .where((Model.retention_days.is_not(None)) | (Model.pruned_before.is_not(None)))
        .order_by(Model.id)
    )
    return [Retained(i, n, d, p) for i, n, d, p in rows]


def boundary_for_ingest(conn: Connection, model_id: int, *, locked: bool = False) -> datetime | None:
    """The model's ``pruned_before`` as ingest must use it: rows for before it are expired.

    A model with a retention setting is read again under a KEY SHARE row lock on PostgreSQL,
    which conflicts only with the FOR UPDATE of ``advance`` (concurrent ingests do not wait for
    each other); ``locked`` says the caller already holds a stronger lock on the row.
    """
    days, before = conn.execute(
        select(Model.retention_days, Model.pruned_before).where(Model.id == model_id)
    ).one()
    if days is None or locked or conn.dialect.name != "postgresql":
        return before
    return conn.execute(
        select(Model.pruned_before).where(Model.id == model_id).with_for_update(read=True, key_share=True)
    ).scalar()


@dataclass(frozen=True, slots=True)
class Advance:
    sealed_from: datetime | None
    sealed_before: datetime
    settings_generation: int


def advance(conn: Connection, model_id: int, now: datetime) -> Advance | None:
    """Move the model's boundary to the UTC midnight ``retention_days`` before today's, but never
    past an hour still marked dirty (its raw rows are not summarised yet). None if it stays.

    The seal records the settings generation the summaries below the boundary were computed
    under: every hour below it is clean, so each was computed under the current generation.
    """
    days, before, generation = conn.execute(
        select(Model.retention_days, Model.pruned_before, Model.settings_generation)
        .where(Model.id == model_id).with_for_update()
    ).one()
    if days is None:
        return None
    target = day_of(now) - timedelta(days=int(days))
    pending_query = select(func.min(DirtyBucket.hour)).where(DirtyBucket.model_id == model_id)
    if before is not None:
        pending_query = pending_query.where(DirtyBucket.hour >= before)
    pending = conn.execute(pending_query).scalar()
    if pending is not None:
        target = min(target, day_of(pending))
    if before is not None and target <= before:
        return None
    conn.execute(update(Model).where(Model.id == model_id).values(pruned_before=target))
    conn.execute(insert(RetentionSeal).values(model_id=model_id, sealed_from=before, sealed_before=target,
                                              settings_generation=int(generation), sealed_at=now))
    return Advance(before, target, int(generation))


def delete_predictions(conn: Connection, model_id: int, before: datetime, limit: int) -> int:
    """Remove the model's predictions scored before ``before`` of up to ``limit`` cases (all their
    versions scored before it); the number of rows removed."""
    cases = select(Prediction.case_id).where(
        Prediction.model_id == model_id, Prediction.scored_at < before
    ).limit(limit)
    ids = sorted({c for (c,) in conn.execute(cases)})
    if not ids:
        return 0
    return _count(conn.execute(
        delete(Prediction).where(Prediction.model_id == model_id, Prediction.case_id.in_(ids),
                                 Prediction.scored_at < before)
    ))


def delete_outcomes(conn: Connection, model_id: int, before: datetime, limit: int) -> tuple[int, int]:
    """Remove up to ``limit`` outcomes (and their label history) observed before ``before``
    whose case has no prediction left; (outcomes, revisions) removed.

    An outcome whose case still has a retained prediction stays with it.
    """
    has_prediction = select(Prediction.case_id).where(
        Prediction.model_id == model_id, Prediction.case_id == Outcome.case_id
    ).exists()
    cases = select(Outcome.case_id).where(
        Outcome.model_id == model_id,
        Outcome.first_observed_at < before,  # the indexed column; first_observed_at <= observed_at
        Outcome.observed_at < before,
        ~has_prediction,
    ).limit(limit)
    ids = sorted(c for (c,) in conn.execute(cases))
    if not ids:
        return 0, 0
    revisions = _count(conn.execute(
        delete(OutcomeRevision).where(OutcomeRevision.model_id == model_id, OutcomeRevision.case_id.in_(ids))
    ))
    outcomes = _count(conn.execute(
        delete(Outcome).where(Outcome.model_id == model_id, Outcome.case_id.in_(ids))
    ))
    return outcomes, revisions


def delete_delivered(conn: Connection, before: datetime, limit: int) -> tuple[int, int]:
    """Remove up to ``limit`` webhook deliveries delivered before ``before`` with their attempts,
    then events created before it that no delivery refers to any more; (deliveries, events).

    Pending and failed deliveries stay: they are what an operator looks into."""
    ids = [i for (i,) in conn.execute(
        select(WebhookDelivery.id).where(WebhookDelivery.state == DELIVERED,
                                         WebhookDelivery.finished_at < before)
        .order_by(WebhookDelivery.id).limit(limit)
    )]
    deliveries = 0
    if ids:
        conn.execute(delete(WebhookAttempt).where(WebhookAttempt.delivery_id.in_(ids)))
        deliveries = _count(conn.execute(delete(WebhookDelivery).where(WebhookDelivery.id.in_(ids))))
    referred = select(WebhookDelivery.id).where(WebhookDelivery.event_id == OutboxEvent.id).exists()
    events = [i for (i,) in conn.execute(
        select(OutboxEvent.id).where(OutboxEvent.created_at < before, ~referred)
        .order_by(OutboxEvent.id).limit(limit)
    )]
    removed = _count(conn.execute(delete(OutboxEvent).where(OutboxEvent.id.in_(events)))) if events else 0
    return deliveries, removed


def delete_audit(conn: Connection, before: datetime, limit: int) -> int:
    """Remove up to ``limit`` audit events recorded before ``before``, oldest first."""
    ids = [i for (i,) in conn.execute(
        select(AuditEvent.id).where(AuditEvent.at < before).order_by(AuditEvent.id).limit(limit)
    )]
    return _count(conn.execute(delete(AuditEvent).where(AuditEvent.id.in_(ids)))) if ids else 0


@dataclass(frozen=True, slots=True)
class Seal:
    sealed_from: datetime | None
    sealed_before: datetime
    settings_generation: int
    sealed_at: datetime


def seals_overlapping(conn: Connection, model_id: int, start: datetime, end: datetime) -> list[Seal]:
    """Seals of the model covering some instant of [start, end), oldest first."""
    rows = conn.execute(
        select(RetentionSeal.sealed_from, RetentionSeal.sealed_before, RetentionSeal.settings_generation,
               RetentionSeal.sealed_at)
        .where(RetentionSeal.model_id == model_id, RetentionSeal.sealed_before > start,
               (RetentionSeal.sealed_from.is_(None)) | (RetentionSeal.sealed_from < end))
        .order_by(RetentionSeal.sealed_before)
    )
    return [Seal(f, b, int(g), a) for f, b, g, a in rows]


def _count(result: object) -> int:
    return int(getattr(result, "rowcount", 0) or 0)
