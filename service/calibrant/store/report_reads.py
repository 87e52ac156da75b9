"""What a report reads besides metrics: the alarms of a span and the webhook deliveries of its events."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from calibrant.store.alarm_tables import Alarm
from calibrant.store.webhook_tables import OutboxEvent, WebhookDelivery


def alarms_during(session: Session, model_id: int, start: datetime, end: datetime,
                  as_of: datetime) -> list[Alarm]:
    """Alarms open at some time in [start, min(end, as_of)] as recorded by ``as_of``: opened
    before the span's end and by ``as_of``, and not resolved before the span began."""
    return list(session.scalars(
        select(Alarm)
        .where(Alarm.model_id == model_id, Alarm.opened_at < end, Alarm.opened_at <= as_of,
               or_(Alarm.resolved_at.is_(None), Alarm.resolved_at >= start))
        .order_by(Alarm.opened_at, Alarm.id)
    ))


def deliveries_during(session: Session, model_id: int, start: datetime, end: datetime,
                      as_of: datetime) -> list[tuple[str, str, datetime | None]]:
    """(event kind, delivery state, finished_at) of the deliveries of the model's events
    created in [start, end) and by ``as_of``."""
    rows = session.execute(
        select(OutboxEvent.kind, WebhookDelivery.state, WebhookDelivery.finished_at)
        .join(WebhookDelivery, WebhookDelivery.event_id == OutboxEvent.id)
        .where(OutboxEvent.model_id == model_id, OutboxEvent.created_at >= start,
               OutboxEvent.created_at < end, OutboxEvent.created_at <= as_of)
        .order_by(WebhookDelivery.id)
    ).all()
    return [(kind, state, finished) for kind, state, finished in rows]
