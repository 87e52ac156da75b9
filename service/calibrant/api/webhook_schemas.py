"""HTTP schemas of /v1/webhooks: create, update, public view, the delivery log, outbox health."""

from __future__ import annotations

from typing import Literal, get_args

from pydantic import BaseModel, ConfigDict, Field, field_validator

from calibrant.api.instant import Instant
from calibrant.vocabulary.names import NAME_PATTERN

EventType = Literal["alarm.opened", "alarm.resolved"]


class WebhookCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    url: str = Field(min_length=1, max_length=2000, description="http or https URL of the receiver.")
    description: str = Field("", max_length=500)
    model: str | None = Field(None, pattern=NAME_PATTERN, description="Only this model's events; null: all.")
    types: list[EventType] = Field(
        default_factory=lambda: list(get_args(EventType)), min_length=1, max_length=10
    )


class WebhookUpdate(BaseModel):
    """Merge: an absent field is unchanged; ``model: null`` removes the model filter.

    ``url``, ``description`` and ``types`` may be absent but not null: a receiver always has
    them (the None defaults only mark "absent"; a validator runs only on sent values).
    """

    model_config = ConfigDict(extra="forbid")

    url: str | None = Field(None, min_length=1, max_length=2000)
    description: str | None = Field(None, max_length=500)
    model: str | None = Field(None, pattern=NAME_PATTERN)
    types: list[EventType] | None = Field(None, min_length=1, max_length=10)

    @field_validator("url", "description", "types")
    @classmethod
    def _not_null(cls, value: object) -> object:
        if value is None:
            raise ValueError("must not be null; leave the field out to keep its value")
        return value


class WebhookOut(BaseModel):
    id: int
    url: str
    description: str
    model: str | None
    types: list[EventType] = Field(description="Event types this receiver gets.")
    failing: bool = Field(description="True after repeated consecutive failed attempts.")
    failing_since: Instant | None
    consecutive_failures: int
    last_success_at: Instant | None
    created_at: Instant
    updated_at: Instant


class WebhookCreated(WebhookOut):
    secret: str = Field(
        description="Standard Webhooks signing secret (whsec_…). Shown only in this response."
    )


class WebhookList(BaseModel):
    webhooks: list[WebhookOut]
    count: int


class AttemptOut(BaseModel):
    number: int
    attempted_at: Instant
    status_code: int | None = Field(description="The receiver's HTTP status; null if none came back.")
    latency_ms: float
    error: str | None = Field(description="Connection error, timeout or refused address.")
    next_attempt_at: Instant | None = Field(description="When the next retry is due; null if none.")


class DeliveryOut(BaseModel):
    id: int
    webhook_id: str = Field(description="The `webhook-id` header, the same on every attempt.")
    type: str = Field(description="The event type, as in the payload's `type`.")
    state: Literal["pending", "delivered", "failed"]
    created_at: Instant
    next_attempt_at: Instant | None
    finished_at: Instant | None
    attempts: list[AttemptOut]


class DeliveryList(BaseModel):
    deliveries: list[DeliveryOut]
    count: int


class OutboxHealth(BaseModel):
    pending: int = Field(description="Deliveries not yet delivered or given up.")
    due: int = Field(description="Pending deliveries whose next attempt is due now.")
    oldest_pending_at: Instant | None
    failing_webhooks: list[int] = Field(description="Ids of targets that keep failing.")
