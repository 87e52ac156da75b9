"""The reported outcomes the delay distribution is measured from (rollup.outcome_delay)."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np
from sqlalchemy import Connection, and_, func, select

from calibrant.store.tables import Outcome, Prediction

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


@dataclass(frozen=True, slots=True)
class ReportedOutcomes:
    """One row per reported case: epoch seconds of its first scoring, first report and occurrence."""

    scored: np.ndarray  # the earliest scored_at over the case's versions
    first_observed: np.ndarray
    occurred: np.ndarray  # NaN when the sender did not say
    label: np.ndarray  # int8, the current label


def _seconds(t: datetime | None) -> float:
    if t is None:
        return float("nan")
    if t.tzinfo is None:  # SQLite's MIN() gives back the stored text's naive UTC
        t = t.replace(tzinfo=UTC)
    return (t - _EPOCH).total_seconds()


def reported_since(conn: Connection, model_id: int, since: datetime) -> ReportedOutcomes:
    """Cases first reported at or after ``since`` and scored at or after it, with a prediction.

    The range on first_observed_at uses the outcomes index (model_id, first_observed_at);
    a case is reported after it is scored, so no case scored since ``since`` is missed.
    """
    scored = func.min(Prediction.scored_at)
    query = (
        select(scored, Outcome.first_observed_at, Outcome.occurred_at, Outcome.label)
        .select_from(Outcome)
        .join(Prediction, and_(Prediction.model_id == Outcome.model_id,
                               Prediction.case_id == Outcome.case_id))
        .where(Outcome.model_id == model_id, Outcome.first_observed_at >= since)
        .group_by(Outcome.case_id, Outcome.first_observed_at, Outcome.occurred_at, Outcome.label)
        .having(scored >= since)
    )
    rows = conn.execute(query).all()
    return ReportedOutcomes(
        np.array([_seconds(r[0]) for r in rows], dtype=np.float64),
        np.array([_seconds(r[1]) for r in rows], dtype=np.float64),
        np.array([_seconds(r[2]) for r in rows], dtype=np.float64),
        np.array([r[3] for r in rows], dtype=np.int8),
    )
