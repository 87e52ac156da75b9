"""Reads and appends of the history tables: settings and rules versions, plan versions, snapshots."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from calibrant.store.history_tables import PlanVersion, ReportSnapshot, SettingsVersion
from calibrant.store.upsert import insert_for


def add_version(session: Session, model_id: int, subject: str, content: Any, *, at: datetime,
                actor: str) -> SettingsVersion:
    row = SettingsVersion(model_id=model_id, subject=subject, recorded_at=at, actor=actor, content=content)
    session.add(row)
    return row


def has_versions(session: Session, model_id: int, subject: str) -> bool:
    return session.scalar(
        select(SettingsVersion.id).where(SettingsVersion.model_id == model_id,
                                         SettingsVersion.subject == subject).limit(1)
    ) is not None


def version_at(session: Session, model_id: int, subject: str, at: datetime) -> SettingsVersion | None:
    """The last version recorded at or before ``at`` (ties: the later id)."""
    return session.scalars(
        select(SettingsVersion)
        .where(SettingsVersion.model_id == model_id, SettingsVersion.subject == subject,
               SettingsVersion.recorded_at <= at)
        .order_by(SettingsVersion.recorded_at.desc(), SettingsVersion.id.desc())
        .limit(1)
    ).one_or_none()


def first_version(session: Session, model_id: int, subject: str) -> SettingsVersion | None:
    return session.scalars(
        select(SettingsVersion)
        .where(SettingsVersion.model_id == model_id, SettingsVersion.subject == subject)
        .order_by(SettingsVersion.recorded_at, SettingsVersion.id)
        .limit(1)
    ).one_or_none()


def versions_between(session: Session, model_id: int, after: datetime | None, until: datetime,
                     limit: int = 1000) -> list[SettingsVersion]:
    """Versions of both subjects recorded in (after, until], oldest first."""
    query = select(SettingsVersion).where(SettingsVersion.model_id == model_id,
                                          SettingsVersion.recorded_at <= until)
    if after is not None:
        query = query.where(SettingsVersion.recorded_at > after)
    return list(session.scalars(query.order_by(SettingsVersion.recorded_at, SettingsVersion.id).limit(limit)))


# ----------------------------------------------------------------------------- plans
def add_plan(session: Session, model_id: int, content: dict[str, Any], *, at: datetime,
             actor: str) -> PlanVersion:
    last = session.scalar(select(func.max(PlanVersion.version)).where(PlanVersion.model_id == model_id))
    row = PlanVersion(model_id=model_id, version=(last or 0) + 1, recorded_at=at, actor=actor,
                      content=content)
    session.add(row)
    session.flush()  # a concurrent PUT of the same version fails here on the unique index
    return row


def plan_at(session: Session, model_id: int, at: datetime) -> PlanVersion | None:
    return session.scalars(
        select(PlanVersion)
        .where(PlanVersion.model_id == model_id, PlanVersion.recorded_at <= at)
        .order_by(PlanVersion.version.desc())
        .limit(1)
    ).one_or_none()


def plan_version(session: Session, model_id: int, version: int) -> PlanVersion | None:
    return session.scalars(
        select(PlanVersion).where(PlanVersion.model_id == model_id, PlanVersion.version == version)
    ).one_or_none()


def plan_versions(session: Session, model_id: int) -> list[PlanVersion]:
    return list(session.scalars(
        select(PlanVersion).where(PlanVersion.model_id == model_id).order_by(PlanVersion.version)
    ))


# ----------------------------------------------------------------------------- snapshots
def find_snapshot(session: Session, model_id: int, start: datetime, end: datetime,
                  as_of: datetime) -> ReportSnapshot | None:
    """The latest stored snapshot of exactly this (model, start, end, as_of)."""
    return session.scalars(
        select(ReportSnapshot)
        .where(ReportSnapshot.model_id == model_id, ReportSnapshot.start == start,
               ReportSnapshot.end == end, ReportSnapshot.as_of == as_of)
        .order_by(ReportSnapshot.generated_at.desc(), ReportSnapshot.id.desc())
        .limit(1)
    ).one_or_none()


def save_snapshot(session: Session, model_id: int, start: datetime, end: datetime, as_of: datetime,
                  content_hash: str, body: str, *, at: datetime, actor: str) -> ReportSnapshot:
    """Store a snapshot unless one with the same key and hash is there (the same report again)."""
    existing = session.scalars(
        select(ReportSnapshot).where(
            ReportSnapshot.model_id == model_id, ReportSnapshot.start == start, ReportSnapshot.end == end,
            ReportSnapshot.as_of == as_of, ReportSnapshot.content_hash == content_hash)
    ).one_or_none()
    if existing is not None:
        return existing
    # Two readers building the same report at once: the loser's INSERT does nothing (it waits for
    # the winner on PostgreSQL) and both return the one stored row.
    session.execute(
        insert_for(session.get_bind().dialect.name, ReportSnapshot)
        .values(model_id=model_id, start=start, end=end, as_of=as_of, content_hash=content_hash,
                generated_at=at, actor=actor, body=body)
        .on_conflict_do_nothing(index_elements=["model_id", "start", "end", "as_of", "content_hash"])
    )
    return session.scalars(
        select(ReportSnapshot).where(
            ReportSnapshot.model_id == model_id, ReportSnapshot.start == start, ReportSnapshot.end == end,
            ReportSnapshot.as_of == as_of, ReportSnapshot.content_hash == content_hash)
    ).one()


def previous_snapshot(session: Session, model_id: int, start: datetime,
                      known_at: datetime) -> ReportSnapshot | None:
    """The snapshot of the latest period ending at or before ``start``, among those generated by
    ``known_at`` (so that a report rebuilt later finds the same predecessor)."""
    return session.scalars(
        select(ReportSnapshot)
        .where(ReportSnapshot.model_id == model_id, ReportSnapshot.end <= start,
               ReportSnapshot.generated_at <= known_at)
        .order_by(ReportSnapshot.end.desc(), ReportSnapshot.as_of.desc(), ReportSnapshot.id.desc())
        .limit(1)
    ).one_or_none()
