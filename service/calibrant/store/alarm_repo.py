"""SQL of the alarms: rules, chart streams, alarms, versions and feed times.

The cases charts consume are read by ``store.mature_cases``.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import UTC, datetime
from typing import Any, cast

from sqlalchemy import Connection, func, select
from sqlalchemy.engine import CursorResult
from sqlalchemy.orm import Session

from calibrant.store.alarm_tables import OPEN, Alarm, AlarmModelState, AlarmRule, ChartStream
from calibrant.store.rollup_tables import BucketSummary, DirtyBucket
from calibrant.store.tables import Model, Prediction
from calibrant.store.types import BIG_INTEGER_IDS
from calibrant.store.upsert import insert_for


# ----------------------------------------------------------------------------- rules
def rules_of(session: Session, model_id: int) -> list[AlarmRule]:
    return list(session.scalars(select(AlarmRule).where(AlarmRule.model_id == model_id)
                                .order_by(AlarmRule.id)))


def rule_named(session: Session, model_id: int, name: str) -> AlarmRule | None:
    return session.scalars(select(AlarmRule).where(AlarmRule.model_id == model_id,
                                                   AlarmRule.name == name)).one_or_none()


def model_state(session: Session, model_id: int, *, lock: bool = False) -> AlarmModelState | None:
    query = select(AlarmModelState).where(AlarmModelState.model_id == model_id)
    if lock:
        # One evaluator per model at a time across processes; SQLite serialises writers anyway.
        query = query.with_for_update(skip_locked=True)
    return session.scalars(query).one_or_none()


def claim_model_state(session: Session, model_id: int, now: datetime) -> bool:
    """Create the model's alarm state row unless it exists; True if this transaction created it.

    INSERT … ON CONFLICT DO NOTHING, so two processes meeting a new model at the same moment
    never collide on the key: on PostgreSQL the second INSERT waits for the first transaction
    and then inserts nothing; SQLite has one writer at a time.
    """
    # Session.execute is typed as returning a Result; for DML it is a CursorResult (rowcount).
    result = cast(CursorResult[Any], session.execute(
        insert_for(session.get_bind().dialect.name, AlarmModelState)
        .values(model_id=model_id, defaults_created_at=now)
        .on_conflict_do_nothing(index_elements=["model_id"])
    ))
    return bool(result.rowcount)


def all_models(session: Session) -> list[Model]:
    return list(session.scalars(select(Model).order_by(Model.id)))


# ----------------------------------------------------------------------------- streams
def streams_of(session: Session, rule_id: int) -> list[ChartStream]:
    return list(session.scalars(select(ChartStream).where(ChartStream.rule_id == rule_id)
                                .order_by(ChartStream.id)))


def delete_rule_state(session: Session, rule_id: int) -> None:
    for stream in streams_of(session, rule_id):
        session.delete(stream)


# ----------------------------------------------------------------------------- alarms
def open_alarm_for(session: Session, open_key: str) -> Alarm | None:
    return session.scalars(select(Alarm).where(Alarm.open_key == open_key)).one_or_none()


def open_alarms_of_rule(session: Session, rule_id: int) -> list[Alarm]:
    return list(session.scalars(select(Alarm).where(Alarm.rule_id == rule_id, Alarm.state == OPEN)))


def alarm(session: Session, model_id: int, alarm_id: int) -> Alarm | None:
    if alarm_id not in BIG_INTEGER_IDS:
        return None
    return session.scalars(select(Alarm).where(Alarm.model_id == model_id, Alarm.id == alarm_id)
                           .with_for_update()).one_or_none()


def list_alarms(session: Session, model_id: int, *, state: str | None, rule: str | None,
                version: str | None, segment: tuple[str, str] | None, limit: int) -> list[Alarm]:
    query = select(Alarm).where(Alarm.model_id == model_id)
    if state is not None:
        query = query.where(Alarm.state == state)
    if rule is not None:
        query = query.where(Alarm.rule_name == rule)
    if version is not None:
        query = query.where(Alarm.version == version)
    if segment is not None:
        query = query.where(Alarm.segment_key == segment[0], Alarm.segment_value == segment[1])
    return list(session.scalars(query.order_by(Alarm.id.desc()).limit(limit)))


def alarms_opened_since(session: Session, model_id: int, since: datetime) -> list[Alarm]:
    return list(session.scalars(select(Alarm).where(Alarm.model_id == model_id, Alarm.opened_at >= since)
                                .order_by(Alarm.id)))


def summaries_recomputed_since(conn: Connection, model_id: int, version: str | None,
                               segment: tuple[str, str], start: datetime, end: datetime,
                               since: datetime) -> bool:
    """Whether any hour of [start, end) of the stream was summarised again after ``since``."""
    query = select(BucketSummary.hour).where(
        BucketSummary.model_id == model_id, BucketSummary.segment_key == segment[0],
        BucketSummary.segment_value == segment[1], BucketSummary.hour >= start, BucketSummary.hour < end,
        BucketSummary.computed_at > since)
    if version is not None:
        query = query.where(BucketSummary.version == version)
    return conn.execute(query.limit(1)).first() is not None


# ----------------------------------------------------------------------------- versions and feeds
def versions_of(conn: Connection, model_id: int) -> list[str]:
    rows = conn.execute(select(Prediction.version).where(Prediction.model_id == model_id).distinct())
    return sorted(r[0] for r in rows)


def last_scored_at(conn: Connection, model_id: int, versions: Sequence[str]) -> datetime | None:
    """Latest scored_at over the versions (one index probe per version)."""
    latest = None
    for version in versions:
        t = conn.scalar(select(func.max(Prediction.scored_at)).where(
            Prediction.model_id == model_id, Prediction.version == version))
        if t is not None and t.tzinfo is None:  # SQLite's MAX() bypasses the column type
            t = t.replace(tzinfo=UTC)
        if t is not None and (latest is None or t > latest):
            latest = t
    return latest


def first_bucket_hour(conn: Connection, model_id: int) -> datetime | None:
    t = conn.scalar(select(func.min(BucketSummary.hour)).where(BucketSummary.model_id == model_id))
    return t.replace(tzinfo=UTC) if t is not None and t.tzinfo is None else t


def has_dirty_before(conn: Connection, model_id: int, end: datetime) -> bool:
    """Whether some bucket before ``end`` still waits for the rollup (its summaries are stale)."""
    return conn.execute(select(func.count()).select_from(DirtyBucket).where(
        DirtyBucket.model_id == model_id, DirtyBucket.hour < end)).scalar_one() > 0
