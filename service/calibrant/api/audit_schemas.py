"""Response models of GET /v1/audit."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, Field

from calibrant.api.instant import Instant


class AuditEventOut(BaseModel):
    id: int = Field(description="Increases with every event; pass a page's last as before_id.")
    at: Instant
    actor: str = Field(description="'key:<key_id>', 'local' (loopback without keys) or 'cli'.")
    action: str = Field(description="What happened, e.g. model.settings_changed, rule.changed, key.revoked.")
    target: str = Field(
        description="What it happened to: a model, model/rule, model/alarm id, key or webhook."
    )
    model: str | None = Field(description="The model concerned; null for keys and model-less webhooks.")
    detail: dict[str, Any] = Field(description="What changed, from and to; never a secret.")


class AuditPage(BaseModel):
    events: list[AuditEventOut] = Field(description="Newest first.")
    count: int
    next_before_id: int | None = Field(
        description="Pass as before_id for the next (older) page; null: this is the last page."
    )
