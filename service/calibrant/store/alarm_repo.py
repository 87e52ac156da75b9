"""SQL of the alarms: rules, chart streams, alarms, and the mature cases charts consume.

Maturity time of a case (the charts' processing order is (matured_at, case_id)):

* with an outcome horizon H and lag L: the end of its scored hour + H + L, the
  moment its bucket becomes mature (DESIGN 3), whether or not a label came;
* without a horizon: the later of ``scored_at`` and the ``observed_at`` of the
  case's first label (it is mature once both are known), no earlier than L days
  before now. A correction keeps that time (``Outcome.first_observed_at``), so a
  case never moves in the order: a correction behind a watermark is late.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np
import orjson
from sqlalchemy import Connection, and_, func, or_, select
from sqlalchemy.orm import Session

from calibrant.store.alarm_tables import OPEN, Alarm, AlarmModelState, AlarmRule, ChartStream
from calibrant.store.rollup_tables import BucketSummary, DirtyBucket
from calibrant.store.tables import Model, Outcome, Prediction

HOUR = timedelta(hours=1)


def _floor_hour(t: datetime) -> datetime:
    return t.replace(minute=0, second=0, microsecond=0)


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


# ----------------------------------------------------------------------------- mature cases
@dataclass(frozen=True, slots=True)
class MatureCases:
    """One version's cases in processing order; ``label`` −1 means mature but unlabelled."""

    matured_at: list[datetime]
    case_id: list[str]
    probability: np.ndarray
    label: np.ndarray
    tags: list[dict[str, str]]

    def __len__(self) -> int:
        return len(self.case_id)


def versions_of(conn: Connection, model_id: int) -> list[str]:
    rows = conn.execute(select(Prediction.version).where(Prediction.model_id == model_id).distinct())
    return sorted(r[0] for r in rows)


def _maturity(model: Model, scored_at: datetime, first_observed: datetime | None) -> datetime | None:
    if model.outcome_horizon_days is not None:
        delay = timedelta(days=model.outcome_horizon_days + (model.outcome_lag_days or 0))
        return _floor_hour(scored_at) + HOUR + delay
    return None if first_observed is None else max(scored_at, first_observed)


def mature_cases(conn: Connection, model: Model, version: str, *, after: datetime | None,
                 now: datetime) -> MatureCases:
    """Cases of ``version`` with after ≤ matured_at ≤ now (cut at now − L without a horizon),
    sorted by (matured_at, case_id). The caller drops those at or before its watermark."""
    query = (
        select(Prediction.case_id, Prediction.probability, Prediction.scored_at, Prediction.tags,
               Outcome.label, Outcome.first_observed_at)
        .where(Prediction.model_id == model.id, Prediction.version == version)
    )
    join = and_(Outcome.model_id == Prediction.model_id, Outcome.case_id == Prediction.case_id)
    if model.outcome_horizon_days is not None:
        delay = timedelta(days=model.outcome_horizon_days + (model.outcome_lag_days or 0))
        # matured_at = floor_hour(scored_at) + 1h + delay ≤ now  ⇔  scored_at < floor_hour(now − delay)
        query = query.outerjoin(Outcome, join).where(Prediction.scored_at < _floor_hour(now - delay))
        if after is not None:
            query = query.where(Prediction.scored_at >= _floor_hour(after - delay) - HOUR)
    else:
        cutoff = now - timedelta(days=model.outcome_lag_days or 0)
        query = query.join(Outcome, join).where(Prediction.scored_at <= cutoff,
                                                Outcome.first_observed_at <= cutoff)
        if after is not None:
            query = query.where(or_(Prediction.scored_at >= after, Outcome.first_observed_at >= after))
    rows = []
    for case_id, p, scored_at, tags, label, first_observed in conn.execute(query):
        matured = _maturity(model, scored_at, first_observed)
        if matured is None or (after is not None and matured < after):
            continue
        state = (0 if model.implicit_negatives else -1) if label is None else label
        rows.append((matured, case_id, p, state, tags))
    rows.sort(key=lambda r: (r[0], r[1]))
    return MatureCases(
        [r[0] for r in rows], [r[1] for r in rows],
        np.array([r[2] for r in rows], dtype=np.float64),
        np.array([r[3] for r in rows], dtype=np.int8),
        [orjson.loads(r[4]) if r[4] else {} for r in rows],
    )


@dataclass(frozen=True, slots=True)
class LateOutcome:
    matured_at: datetime
    case_id: str
    tags: dict[str, str]
    received_at: datetime


def outcomes_received_since(conn: Connection, model: Model, version: str,
                            since: datetime) -> list[LateOutcome]:
    """Outcomes (new or corrected) received after ``since``, with their case's maturity time."""
    query = (
        select(Prediction.case_id, Prediction.scored_at, Prediction.tags, Outcome.first_observed_at,
               Outcome.received_at)
        .join(Outcome, and_(Outcome.model_id == Prediction.model_id,
                            Outcome.case_id == Prediction.case_id))
        .where(Prediction.model_id == model.id, Prediction.version == version,
               Outcome.received_at > since)
    )
    out = []
    for case_id, scored_at, tags, first_observed, received_at in conn.execute(query):
        matured = _maturity(model, scored_at, first_observed)
        if matured is not None:
            out.append(LateOutcome(matured, case_id, orjson.loads(tags) if tags else {}, received_at))
    return out


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
    return conn.scalar(select(func.count()).select_from(DirtyBucket).where(
        DirtyBucket.model_id == model_id, DirtyBucket.hour < end)) > 0
