"""One case's story: every version's prediction, its outcome, and the label history."""

from __future__ import annotations

from dataclasses import dataclass

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
