"""The append-only audit trail: who changed what, when."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from calibrant.store.tables import AuditEvent


def record(
    session: Session,
    *,
    at: datetime,
    actor: str,
    action: str,
    target: str,
    detail: dict[str, Any] | None = None,
    model_id: int | None = None,
) -> None:
    session.add(
        AuditEvent(
            at=at, actor=actor, action=action, target=target, detail=detail or {}, model_id=model_id
        )
    )


def recent(session: Session, limit: int = 100, model_id: int | None = None) -> list[AuditEvent]:
    query = select(AuditEvent).order_by(AuditEvent.id.desc()).limit(limit)
    if model_id is not None:
        query = query.where(AuditEvent.model_id == model_id)
    return list(session.scalars(query))
