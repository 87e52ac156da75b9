"""The outbox's SQL: events, their deliveries, claims across processes, and the attempt log.

Claiming is the one place where several workers meet. A claim is a
conditional UPDATE that sets a random token and a lease on due, unclaimed
rows and returns the rows it changed; only the holder of the token may
record the outcome. On PostgreSQL the candidate rows are picked with
``FOR UPDATE SKIP LOCKED``, so concurrent claimers take disjoint rows instead
of queueing on each other; on SQLite every write transaction starts with
``BEGIN IMMEDIATE`` (see ``store.engine``), so claims simply run one at a time.
A worker that dies holding a claim delays its deliveries by one lease, after
which another worker takes them over with the same message id.
"""

from __future__ import annotations

import json
from collections.abc import Collection
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any, cast

from sqlalchemy import ColumnElement, and_, func, or_, select, update
from sqlalchemy.engine import CursorResult
from sqlalchemy.orm import Session

from calibrant.store.webhook_tables import (
    PENDING,
    DeliveryState,
    OutboxEvent,
    WebhookAttempt,
    WebhookDelivery,
    WebhookTarget,
)

D = WebhookDelivery


def insert_event(session: Session, *, kind: str, model_id: int | None, body: str, at: datetime) -> int:
    event = OutboxEvent(kind=kind, model_id=model_id, body=body, created_at=at)
    session.add(event)
    session.flush()
    return event.id


def insert_delivery(
    session: Session, *, event_id: int, target_id: int, message_id: str, at: datetime
) -> WebhookDelivery:
    delivery = WebhookDelivery(
        message_id=message_id,
        event_id=event_id,
        target_id=target_id,
        state=PENDING,
        attempts=0,
        next_attempt_at=at,
        created_at=at,
    )
    session.add(delivery)
    session.flush()
    return delivery


def _claimable(now: datetime) -> ColumnElement[bool]:
    return and_(
        D.state == PENDING,
        D.next_attempt_at <= now,
        or_(D.claimed_until.is_(None), D.claimed_until <= now),
    )


def claim_due(
    session: Session,
    *,
    now: datetime,
    token: str,
    limit: int,
    lease: timedelta,
    only_ids: list[int] | None = None,
    skip_models: Collection[int] = (),
) -> list[int]:
    """Claim up to ``limit`` due deliveries for ``token``; the ids claimed, oldest due first.

    Deliveries of events of ``skip_models`` (held back by ``models.isolation``) are left alone.
    """
    candidates = select(D.id).where(_claimable(now)).order_by(D.next_attempt_at, D.id).limit(limit)
    if only_ids is not None:
        candidates = candidates.where(D.id.in_(only_ids))
    if skip_models:
        held = select(OutboxEvent.id).where(OutboxEvent.model_id.in_(sorted(skip_models)))
        candidates = candidates.where(D.event_id.not_in(held))
    # FOR UPDATE SKIP LOCKED is rendered on PostgreSQL only. The candidates are a CTE, which
    # PostgreSQL evaluates once: as an IN (subquery) it may be re-run for each updated row,
    # each run skipping the rows this statement just locked, so LIMIT would not hold.
    due = candidates.with_for_update(skip_locked=True).cte("due")
    # The outer WHERE repeats the conditions: a row that another claimer changed after this
    # statement's snapshot is re-checked against its new version and left alone.
    statement = (
        update(D)
        .where(D.id == due.c.id, _claimable(now))
        .values(claim_token=token, claimed_until=now + lease)
        .returning(D.id)
        .execution_options(synchronize_session=False)
    )
    return sorted(session.scalars(statement))


def renew_claim(session: Session, delivery_id: int, *, token: str, now: datetime, lease: timedelta) -> bool:
    """Extend our claim just before an attempt; False if it lapsed and may be someone else's."""
    # Session.execute is typed as returning a Result; for DML it is a CursorResult, which has rowcount.
    result = cast(CursorResult[Any], session.execute(
        update(D)
        .where(D.id == delivery_id, D.claim_token == token, D.claimed_until > now, D.state == PENDING)
        .values(claimed_until=now + lease)
        .execution_options(synchronize_session=False)
    ))
    return bool(result.rowcount)


@dataclass(frozen=True, slots=True)
class ClaimedDelivery:
    id: int
    message_id: str
    target_id: int
    url: str
    secret: str
    body: str
    attempts: int
    created_at: datetime
    model_id: int | None = None  # the event's model; None for a target's ping


def claimed_work(session: Session, ids: list[int]) -> list[ClaimedDelivery]:
    if not ids:
        return []
    rows = session.execute(
        select(
            D.id, D.message_id, D.target_id, WebhookTarget.url, WebhookTarget.secret,
            OutboxEvent.body, D.attempts, D.created_at, OutboxEvent.model_id,
        )
        .join(WebhookTarget, WebhookTarget.id == D.target_id)
        .join(OutboxEvent, OutboxEvent.id == D.event_id)
        .where(D.id.in_(ids))
        .order_by(D.next_attempt_at, D.id)
    )
    return [ClaimedDelivery(*row) for row in rows]


def record_attempt(
    session: Session,
    delivery: ClaimedDelivery,
    *,
    token: str,
    attempted_at: datetime,
    status_code: int | None,
    latency_ms: float,
    error: str | None,
    state: DeliveryState,
    next_attempt_at: datetime | None,
    finished_at: datetime | None,
) -> bool:
    """Log the attempt and move the delivery on, releasing the claim. False if the claim was lost."""
    number = delivery.attempts + 1
    session.add(
        WebhookAttempt(
            delivery_id=delivery.id,
            number=number,
            attempted_at=attempted_at,
            status_code=status_code,
            latency_ms=latency_ms,
            error=error,
            next_attempt_at=next_attempt_at,
        )
    )
    # Session.execute is typed as returning a Result; for DML it is a CursorResult, which has rowcount.
    result = cast(CursorResult[Any], session.execute(
        update(D)
        .where(D.id == delivery.id, D.claim_token == token)
        .values(
            attempts=number,
            state=state,
            next_attempt_at=next_attempt_at,
            finished_at=finished_at,
            claim_token=None,
            claimed_until=None,
        )
        .execution_options(synchronize_session=False)
    ))
    return bool(result.rowcount)


@dataclass(frozen=True, slots=True)
class Backlog:
    pending: int
    due: int
    oldest_pending_at: datetime | None


def backlog(session: Session, now: datetime) -> Backlog:
    pending, oldest = session.execute(
        select(func.count(), func.min(D.created_at)).where(D.state == PENDING)
    ).one()
    due = session.scalar(select(func.count()).where(D.state == PENDING, D.next_attempt_at <= now))
    return Backlog(pending=pending, due=due or 0, oldest_pending_at=oldest)


@dataclass(frozen=True, slots=True)
class DeliveryRecord:
    delivery: WebhookDelivery
    kind: str
    attempts: list[WebhookAttempt]


def deliveries_of(
    session: Session, target_id: int, limit: int, delivery_id: int | None = None
) -> list[DeliveryRecord]:
    """A target's newest deliveries (or just ``delivery_id``), each with every attempt, oldest first."""
    query = (
        select(D, OutboxEvent.kind)
        .join(OutboxEvent, OutboxEvent.id == D.event_id)
        .where(D.target_id == target_id)
        .order_by(D.id.desc())
        .limit(limit)
    )
    if delivery_id is not None:
        query = query.where(D.id == delivery_id)
    rows = session.execute(query).all()
    ids = [row[0].id for row in rows]
    attempts: dict[int, list[WebhookAttempt]] = {i: [] for i in ids}
    if ids:
        attempt_query = (
            select(WebhookAttempt)
            .where(WebhookAttempt.delivery_id.in_(ids))
            .order_by(WebhookAttempt.delivery_id, WebhookAttempt.number, WebhookAttempt.id)
        )
        for attempt in session.scalars(attempt_query):
            attempts[attempt.delivery_id].append(attempt)
    return [DeliveryRecord(row[0], row[1], attempts[row[0].id]) for row in rows]


@dataclass(frozen=True, slots=True)
class AlarmDelivery:
    kind: str  # alarm.opened or alarm.resolved
    target_url: str
    delivery: WebhookDelivery


def alarm_deliveries(session: Session, model_id: int, alarm_id: int) -> list[AlarmDelivery]:
    """Every delivery of the events announcing one alarm, oldest first.

    An event names its alarm only inside its frozen body, so the model's alarm events
    are read and matched here (a model has few alarm events; its predictions are untouched).
    """
    events = session.execute(
        select(OutboxEvent.id, OutboxEvent.kind, OutboxEvent.body)
        .where(OutboxEvent.model_id == model_id, OutboxEvent.kind.like("alarm.%"))
    ).all()
    ids = [event_id for event_id, _, body in events
           if (_json_loads(body).get("data") or {}).get("alarm", {}).get("id") == alarm_id]
    if not ids:
        return []
    kinds = {event_id: kind for event_id, kind, _ in events}
    rows = session.execute(
        select(D, WebhookTarget.url).join(WebhookTarget, WebhookTarget.id == D.target_id)
        .where(D.event_id.in_(ids)).order_by(D.id)
    ).all()
    return [AlarmDelivery(kinds[row[0].event_id], row[1], row[0]) for row in rows]


def _json_loads(body: str) -> dict[str, Any]:
    loaded = json.loads(body)
    return loaded if isinstance(loaded, dict) else {}
