"""The label a case counts with: an event that happened after the horizon counts as 0.

With a horizon H the model predicts an event within H of scoring; an outcome of 1
whose ``occurred_at`` lies after scored_at + H did not happen in that window. The
comparison is made in SQL so the rollup and the charts read the label they count
with, without fetching both times of every row: a PostgreSQL interval, or SQLite's
julianday() (a double of days: ~0.1 ms resolution, far below any horizon).
"""

from __future__ import annotations

from sqlalchemy import ColumnElement, Connection, Integer, case, func, literal, text
from sqlalchemy.orm import QueryableAttribute

from calibrant.store.tables import Outcome, Prediction


def counted_label(conn: Connection,
                  horizon_days: int | None) -> ColumnElement[int] | QueryableAttribute[int]:
    """``Outcome.label``, or 0 for a 1 that happened after scored_at + H (NULL stays NULL)."""
    if horizon_days is None:
        return Outcome.label
    if conn.dialect.name == "postgresql":
        after = Outcome.occurred_at > Prediction.scored_at + literal(horizon_days) * text("interval '1 day'")
    else:
        after = func.julianday(Outcome.occurred_at) > func.julianday(Prediction.scored_at) + horizon_days
    return case((Outcome.label.is_not(None) & Outcome.occurred_at.is_not(None) & after, 0),
                else_=Outcome.label).cast(Integer)
