"""Tables of webhook delivery: targets, the outbox of events, deliveries and their attempts.

An event is written once (its JSON body frozen, so every retry sends the same
bytes); each subscribed target gets one delivery row, whose ``message_id`` is
the Standard Webhooks ``webhook-id`` on every attempt. All delivery state lives
here, so a restarted process carries on where the previous one stopped.
"""

from __future__ import annotations

from datetime import datetime
from typing import Final, Literal

from sqlalchemy import JSON, Double, ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base
from calibrant.store.types import BigIntPK

DeliveryState = Literal["pending", "delivered", "failed"]
PENDING: Final = "pending"  # waiting for its next attempt (or being attempted under a claim)
DELIVERED: Final = "delivered"  # a 2xx was received
FAILED: Final = "failed"  # the retry window ran out; no further attempts


class WebhookTarget(Base):
    """A receiver URL, what it subscribes to, its signing secret and its health."""

    __tablename__ = "webhook_targets"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    url: Mapped[str] = mapped_column(Text)
    description: Mapped[str] = mapped_column(Text, default="")
    model_name: Mapped[str | None] = mapped_column(String(64), nullable=True)  # None: every model
    event_types: Mapped[list[str]] = mapped_column(JSON)
    # Kept in clear: HMAC signing needs the key itself, unlike API keys which are only compared.
    secret: Mapped[str] = mapped_column(String(100))
    consecutive_failures: Mapped[int] = mapped_column(Integer, default=0)
    failing_since: Mapped[datetime | None] = mapped_column(nullable=True)
    last_success_at: Mapped[datetime | None] = mapped_column(nullable=True)
    created_at: Mapped[datetime]
    updated_at: Mapped[datetime]


class OutboxEvent(Base):
    """One event to announce, with the exact body every delivery of it sends."""

    __tablename__ = "outbox_events"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    kind: Mapped[str] = mapped_column(String(64))
    model_id: Mapped[int | None] = mapped_column(
        Integer, ForeignKey("models.id", ondelete="SET NULL"), nullable=True
    )
    body: Mapped[str] = mapped_column(Text)
    created_at: Mapped[datetime]


class WebhookDelivery(Base):
    """One event on its way to one target; claimed by a worker while an attempt runs."""

    __tablename__ = "webhook_deliveries"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    message_id: Mapped[str] = mapped_column(String(40), unique=True)
    event_id: Mapped[int] = mapped_column(
        BigIntPK, ForeignKey("outbox_events.id", ondelete="CASCADE")
    )
    target_id: Mapped[int] = mapped_column(
        Integer, ForeignKey("webhook_targets.id", ondelete="CASCADE")
    )
    state: Mapped[DeliveryState] = mapped_column(String(16))
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    next_attempt_at: Mapped[datetime | None] = mapped_column(nullable=True)
    claim_token: Mapped[str | None] = mapped_column(String(40), nullable=True)
    claimed_until: Mapped[datetime | None] = mapped_column(nullable=True)
    created_at: Mapped[datetime]  # with the retry window, when attempts stop
    finished_at: Mapped[datetime | None] = mapped_column(nullable=True)

    __table_args__ = (
        Index(None, "state", "next_attempt_at"),
        Index(None, "target_id", "id"),
    )


class WebhookAttempt(Base):
    """What happened on one attempt: the log behind GET /v1/webhooks/{id}/deliveries."""

    __tablename__ = "webhook_attempts"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    delivery_id: Mapped[int] = mapped_column(
        BigIntPK, ForeignKey("webhook_deliveries.id", ondelete="CASCADE")
    )
    number: Mapped[int] = mapped_column(Integer)
    attempted_at: Mapped[datetime]
    status_code: Mapped[int | None] = mapped_column(Integer, nullable=True)
    latency_ms: Mapped[float] = mapped_column(Double)
    error: Mapped[str | None] = mapped_column(Text, nullable=True)
    next_attempt_at: Mapped[datetime | None] = mapped_column(nullable=True)

    __table_args__ = (Index(None, "delivery_id", "number"),)
