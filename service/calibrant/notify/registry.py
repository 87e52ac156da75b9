"""Webhook targets as users manage them: register, change, remove, ping, read the delivery log.

Services flush and never commit; the caller's unit of work commits. Every
change is written to the audit trail (never the secret).
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from calibrant.errors import NotFound, invalid
from calibrant.notify import outbox, payloads, signing
from calibrant.notify.targets import Resolver, TargetRefused, check_target
from calibrant.store import audit, outbox_repo, webhook_targets_repo
from calibrant.store.outbox_repo import DeliveryRecord
from calibrant.store.unit import Session
from calibrant.store.webhook_tables import WebhookDelivery, WebhookTarget


def _checked_url(url: str, *, allow_private: bool, resolver: Resolver) -> str:
    try:
        check_target(url, allow_private=allow_private, resolver=resolver)
    except TargetRefused as exc:
        raise invalid("url", str(exc)) from None
    return url


def _types(types: list[str]) -> list[str]:
    unknown = [t for t in types if t not in payloads.SUBSCRIBABLE_TYPES]
    if unknown or not types:
        raise invalid("types", f"choose one or more of {', '.join(payloads.SUBSCRIBABLE_TYPES)}")
    return sorted(set(types))


def register(
    session: Session,
    *,
    url: str,
    description: str,
    model: str | None,
    event_types: list[str],
    allow_private: bool,
    resolver: Resolver,
    now: datetime,
    actor: str,
) -> tuple[WebhookTarget, str]:
    """A new target and its signing secret (returned here only; it cannot be read back)."""
    secret = signing.new_secret()
    target = webhook_targets_repo.create(
        session,
        url=_checked_url(url, allow_private=allow_private, resolver=resolver),
        description=description,
        model_name=model,
        event_types=_types(event_types),
        secret=secret,
        now=now,
    )
    _audit(session, now, actor, "webhook.created", target)
    return target, secret


def require(session: Session, target_id: int) -> WebhookTarget:
    target = webhook_targets_repo.get(session, target_id)
    if target is None:
        raise NotFound(f"no webhook {target_id}")
    return target


def update(
    session: Session,
    target_id: int,
    changes: dict[str, Any],
    *,
    allow_private: bool,
    resolver: Resolver,
    now: datetime,
    actor: str,
) -> WebhookTarget:
    """Merge ``changes`` (url, description, model, types); absent keys stay as they are."""
    target = require(session, target_id)
    if "url" in changes:
        target.url = _checked_url(changes["url"], allow_private=allow_private, resolver=resolver)
    if "description" in changes:
        target.description = changes["description"]
    if "model" in changes:
        target.model_name = changes["model"]
    if "types" in changes:
        target.event_types = _types(changes["types"])
    target.updated_at = now
    session.flush()
    _audit(session, now, actor, "webhook.updated", target)
    return target


def remove(session: Session, target_id: int, *, now: datetime, actor: str) -> None:
    target = require(session, target_id)
    _audit(session, now, actor, "webhook.deleted", target)
    session.expunge(target)
    webhook_targets_repo.remove(session, target_id)


def ping(session: Session, target_id: int, *, now: datetime) -> WebhookDelivery:
    return outbox.enqueue_ping(session, require(session, target_id), at=now)


def list_all(session: Session) -> list[WebhookTarget]:
    return webhook_targets_repo.list_all(session)


def deliveries(
    session: Session, target_id: int, limit: int, delivery_id: int | None = None
) -> list[DeliveryRecord]:
    require(session, target_id)
    return outbox_repo.deliveries_of(session, target_id, limit, delivery_id)


def _audit(session: Session, now: datetime, actor: str, action: str, target: WebhookTarget) -> None:
    audit.record(
        session,
        at=now,
        actor=actor,
        action=action,
        target=f"webhook:{target.id}",
        detail={"url": target.url, "model": target.model_name, "types": target.event_types},
    )
