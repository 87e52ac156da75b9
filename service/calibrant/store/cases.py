"""One case's story: every version's prediction, its outcome, and the label history."""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from calibrant.store.tables import Outcome, OutcomeRevision, Prediction


@dataclass(frozen=True, slots=True)
class CaseRecord:
    predictions: list[Prediction]
    outcome: Outcome | None
    history: list[OutcomeRevision]

    @property
    def found(self) -> bool:
        return bool(self.predictions) or self.outcome is not None


def load(session: Session, model_id: int, case_id: str) -> CaseRecord:
    predictions = session.scalars(
        select(Prediction)
        .where(Prediction.model_id == model_id, Prediction.case_id == case_id)
        .order_by(Prediction.version)
    ).all()
    outcome = session.get(Outcome, (model_id, case_id))
    history = session.scalars(
        select(OutcomeRevision)
        .where(OutcomeRevision.model_id == model_id, OutcomeRevision.case_id == case_id)
        .order_by(OutcomeRevision.revision)
    ).all()
    return CaseRecord(list(predictions), outcome, list(history))


@dataclass(frozen=True, slots=True)
class NearbyCase:
    case_id: str
    probability: float
    scored_at: datetime
    label: int | None  # the current label; None while none is reported


def nearby(session: Session, model_id: int, version: str, at: datetime,
           segment: tuple[str, str] | None, each_side: int = 5, scan: int = 400) -> list[NearbyCase]:
    """The stream's cases scored just before and after ``at``: up to ``each_side`` on each side
    (the case at ``at`` included on the earlier side), in scoring order.

    Reads at most ``scan`` predictions on each side through the (model, version, scored_at)
    index and keeps those of ``segment`` (a declared tag key and value; None: every case), so a
    rare segment value may show fewer than ``each_side`` cases.
    """
    def side(before: bool) -> list[Prediction]:
        clause = Prediction.scored_at <= at if before else Prediction.scored_at > at
        order = (Prediction.scored_at.desc(), Prediction.case_id.desc()) if before else (
            Prediction.scored_at, Prediction.case_id)
        rows = session.scalars(
            select(Prediction)
            .where(Prediction.model_id == model_id, Prediction.version == version, clause)
            .order_by(*order).limit(scan)
        ).all()
        kept = [p for p in rows if segment is None or _tag(p.tags, segment[0]) == segment[1]]
        return kept[:each_side]

    chosen = [*reversed(side(True)), *side(False)]
    labels = dict(session.execute(
        select(Outcome.case_id, Outcome.label)
        .where(Outcome.model_id == model_id, Outcome.case_id.in_([p.case_id for p in chosen]))
    ).all()) if chosen else {}
    return [NearbyCase(p.case_id, p.probability, p.scored_at, labels.get(p.case_id)) for p in chosen]


def _tag(tags: str | None, key: str) -> str | None:
    if not tags:
        return None
    value = json.loads(tags).get(key)
    return None if value is None else str(value)
