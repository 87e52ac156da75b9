"""Putting events into the outbox, and deciding what an attempt's result means for a delivery.

``enqueue`` is what producers of events (alarms) call inside their own
transaction: it only inserts rows, so the event is announced exactly when,
and only if, that transaction commits. Nothing here sends anything; the
``jobs.deliver_due`` job does.
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from calibrant.config import Settings
from calibrant.notify import backoff, payloads, signing
from calibrant.store import models_repo, outbox_repo, webhook_targets_repo
from calibrant.store.unit import Session
from calibrant.store.webhook_tables import (
    DELIVERED,
    FAILED,
    PENDING,
    DeliveryState,
    WebhookDelivery,
    WebhookTarget,
)


def enqueue(
    session: Session,
    kind: str,
    payload: dict[str, Any],
    *,
    model_id: int | None = None,
    at: datetime,
) -> list[int]:
    """Record an event and one delivery per subscribed target; the delivery ids.

    ``payload`` becomes the envelope's ``data`` (see ``payloads.alarm_data``);
    the body is rendered now and never again, so every attempt signs the same
    bytes. Targets with a model filter only get events of that model.
    """
    if kind not in payloads.SUBSCRIBABLE_TYPES:
        raise ValueError(f"{kind!r} is not an event kind targets subscribe to: {payloads.SUBSCRIBABLE_TYPES}")
    model_name = models_repo.model_name(session, model_id) if model_id is not None else None
    targets = webhook_targets_repo.subscribed(session, kind, model_name)
    body = payloads.envelope(kind, at, payload).decode()
    event_id = outbox_repo.insert_event(session, kind=kind, model_id=model_id, body=body, at=at)
    return [_deliver_to(session, event_id, t, at).id for t in targets]


def enqueue_ping(session: Session, target: WebhookTarget, *, at: datetime) -> WebhookDelivery:
    """A test event for one target, whatever it subscribes to."""
    body = payloads.envelope(payloads.PING, at, payloads.ping_data(target.id, at)).decode()
    event_id = outbox_repo.insert_event(session, kind=payloads.PING, model_id=None, body=body, at=at)
    return _deliver_to(session, event_id, target, at)


def _deliver_to(session: Session, event_id: int, target: WebhookTarget, at: datetime) -> WebhookDelivery:
    return outbox_repo.insert_delivery(
        session,
        event_id=event_id,
        target_id=target.id,
        message_id=signing.new_message_id(),
        at=at,
    )


@dataclass(frozen=True, slots=True)
class Verdict:
    """Where a delivery goes after one attempt."""

    state: DeliveryState
    next_attempt_at: datetime | None
    finished_at: datetime | None


def verdict(
    *,
    delivered: bool,
    attempted_at: datetime,
    created_at: datetime,
    failed_attempts: int,
    retry_after: str | None,
    settings: Settings,
    rng: random.Random,
) -> Verdict:
    """Delivered, retried at a backoff instant (never before Retry-After), or failed for good.

    The retry window is counted from the event, and read from the settings at
    each attempt, so changing it applies to deliveries already queued.
    """
    if delivered:
        return Verdict(DELIVERED, None, attempted_at)
    when = backoff.next_attempt(
        now=attempted_at,
        deadline=created_at + timedelta(hours=settings.webhook_retry_window_hours),
        failed_attempts=failed_attempts,
        base_seconds=settings.webhook_retry_base_seconds,
        max_seconds=settings.webhook_retry_max_interval_seconds,
        rng=rng,
        retry_after=backoff.parse_retry_after(retry_after, attempted_at),
    )
    if when is None:
        return Verdict(FAILED, None, attempted_at)
    return Verdict(PENDING, when, None)
