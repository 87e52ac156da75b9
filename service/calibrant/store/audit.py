"""The append-only audit trail: who changed what, when."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from calibrant.store.tables import AuditEvent, Model


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


def search(
    session: Session,
    *,
    model_id: int | None,
    actor: str | None,
    action: str | None,
    start: datetime | None,
    end: datetime | None,
    before_id: int | None,
    limit: int,
) -> list[tuple[AuditEvent, str | None]]:
    """Events matching every filter given, newest first (by id), each with its model's name.

    Paging is by id (``before_id``), not by offset: a page stays the same while new events
    arrive, and each page is one index range.
    """
    query = (
        select(AuditEvent, Model.name)
        .outerjoin(Model, Model.id == AuditEvent.model_id)
        .order_by(AuditEvent.id.desc())
        .limit(limit)
    )
    if model_id is not None:
        query = query.where(AuditEvent.model_id == model_id)
    if actor is not None:
        query = query.where(AuditEvent.actor == actor)
    if action is not None:
        query = query.where(AuditEvent.action == action)
    if start is not None:
        query = query.where(AuditEvent.at >= start)
    if end is not None:
        query = query.where(AuditEvent.at < end)
    if before_id is not None:
        query = query.where(AuditEvent.id < before_id)
    return [(event, name) for event, name in session.execute(query)]
