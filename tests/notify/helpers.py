"""Setting up targets and events directly through the services, as the alarms will."""

from __future__ import annotations

from datetime import UTC, datetime

import sqlalchemy as sa
from sqlalchemy.orm import Session, sessionmaker

from calibrant.config import Settings
from calibrant.notify import enqueue, payloads, registry
from calibrant.store import models_repo
from calibrant.store.engine import make_engine, make_session_factory


def loopback_resolver(_host: str, _port: int) -> list[str]:
    return ["127.0.0.1"]


def sessions_for(settings: Settings) -> tuple[sa.Engine, sessionmaker[Session]]:
    """A new engine and session factory, as a freshly started process would make."""
    engine = make_engine(settings)
    return engine, make_session_factory(engine)


def add_target(
    sessions: sessionmaker[Session],
    url: str,
    now: datetime,
    *,
    model: str | None = None,
    kinds: tuple[str, ...] = payloads.SUBSCRIBABLE_TYPES,
) -> tuple[int, str]:
    with sessions() as session:
        target, secret = registry.register(
            session,
            url=url,
            description="test receiver",
            model=model,
            event_types=list(kinds),
            allow_private=True,
            resolver=loopback_resolver,
            now=now,
            actor="test",
        )
        session.commit()
        return target.id, secret


def alarm_payload(model: str, n: int) -> dict:
    return payloads.alarm_data(
        alarm_id=n,
        rule="excess-log-loss",
        state="open",
        model=model,
        version="v1",
        segment=("region", "north"),
        evidence={"statistic": 3.1 + n, "n": 1200, "interval": [0.01, 0.05]},
        metrics_query=f"/v1/models/{model}/metrics?granularity=day",
        opened_at=datetime(2026, 11, 30, tzinfo=UTC),
    )


def add_events(
    sessions: sessionmaker[Session], model: str, count: int, now: datetime, kind: str = payloads.ALARM_OPENED
) -> list[int]:
    """``count`` events of ``model``, each in its own transaction; the delivery ids."""
    ids: list[int] = []
    for n in range(count):
        with sessions() as session:
            row, _ = models_repo.get_or_create(session, model, now)
            ids += enqueue(session, kind, alarm_payload(model, n), model_id=row.id, at=now)
            session.commit()
    return ids
