"""Webhook targets: registration, lookup, removal, and the health counters delivery keeps."""

from __future__ import annotations

from datetime import datetime
from typing import Any, cast

from sqlalchemy import case, delete, select, update
from sqlalchemy.engine import CursorResult
from sqlalchemy.orm import Session

from calibrant.store.types import INTEGER_IDS
from calibrant.store.webhook_tables import WebhookTarget


def create(
    session: Session,
    *,
    url: str,
    description: str,
    model_name: str | None,
    event_types: list[str],
    secret: str,
    now: datetime,
) -> WebhookTarget:
    target = WebhookTarget(
        url=url,
        description=description,
        model_name=model_name,
        event_types=event_types,
        secret=secret,
        consecutive_failures=0,
        created_at=now,
        updated_at=now,
    )
    session.add(target)
    session.flush()
    return target


def get(session: Session, target_id: int) -> WebhookTarget | None:
    if target_id not in INTEGER_IDS:  # webhook_targets.id is a 32-bit integer
        return None
    return session.get(WebhookTarget, target_id)


def list_all(session: Session) -> list[WebhookTarget]:
    return list(session.scalars(select(WebhookTarget).order_by(WebhookTarget.id)))


def subscribed(session: Session, kind: str, model_name: str | None) -> list[WebhookTarget]:
    """Targets that want ``kind`` events of ``model_name`` (a target without a model filter wants all)."""
    # The kinds list is JSON; there are few targets, so it is filtered here rather than in SQL
    # (JSON containment is spelled differently on each dialect).
    return [
        t
        for t in list_all(session)
        if kind in t.event_types and (t.model_name is None or t.model_name == model_name)
    ]


def remove(session: Session, target_id: int) -> bool:
    """Delete a target; its deliveries and their attempts go with it (ON DELETE CASCADE)."""
    # Session.execute is typed as returning a Result; for DML it is a CursorResult, which has rowcount.
    result = cast(
        CursorResult[Any], session.execute(delete(WebhookTarget).where(WebhookTarget.id == target_id))
    )
    return bool(result.rowcount)


def record_result(
    session: Session, target_id: int, *, delivered: bool, now: datetime, failing_after: int
) -> None:
    """Count consecutive failures in one UPDATE, so concurrent workers never lose a count."""
    t = WebhookTarget
    values: dict[str, Any]  # plain values, or SQL expressions over the row's current values
    if delivered:
        values = {"consecutive_failures": 0, "failing_since": None, "last_success_at": now}
    else:
        values = {
            "consecutive_failures": t.consecutive_failures + 1,
            "failing_since": case(
                (t.failing_since.is_not(None), t.failing_since),
                (t.consecutive_failures + 1 >= failing_after, now),
                else_=None,
            ),
        }
    session.execute(
        update(t).where(t.id == target_id).values(**values).execution_options(synchronize_session=False)
    )


def failing(session: Session) -> list[WebhookTarget]:
    return list(
        session.scalars(
            select(WebhookTarget).where(WebhookTarget.failing_since.is_not(None)).order_by(WebhookTarget.id)
        )
    )
