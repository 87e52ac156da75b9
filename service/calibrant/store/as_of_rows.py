"""Raw rows as the service knew them at an instant ``as_of``: what a reproducible report reads.

A prediction is known if it was received at or before ``as_of``; a case's label is the
latest of its outcome revisions received at or before ``as_of`` (``outcome_revisions`` keeps
every label a case has had). Rows come in primary-key order so that sums over them are
added in the same order whenever the report is rebuilt: floating-point addition is not
associative, and "the same numbers later" means the same bits.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
from sqlalchemy import Integer, and_, case, cast, func, select
from sqlalchemy.engine import Connection
from sqlalchemy.orm import aliased
from sqlalchemy.sql.elements import ColumnElement

from calibrant.store.tables import Outcome, OutcomeRevision, Prediction

CHUNK_ROWS = 1 << 16


@dataclass(frozen=True, slots=True)
class KnownRows:
    """Column arrays of the known predictions of a span: one entry per (case, version)."""

    probability: np.ndarray  # float64
    label: np.ndarray  # int8: 1, 0, or -1 when no label was known
    scored_epoch: np.ndarray  # int64 seconds since 1970-01-01 UTC (whole seconds)
    version: np.ndarray  # object (str)
    tags: list[str | None]  # canonical JSON per row

    @property
    def size(self) -> int:
        return int(self.probability.size)


def _epoch_seconds(conn: Connection, column: Any) -> ColumnElement[int]:
    if conn.dialect.name == "postgresql":
        return cast(func.floor(func.extract("epoch", column)), Integer)
    return cast(func.strftime("%s", column), Integer)


def revisions_after(conn: Connection, model_id: int, as_of: datetime) -> bool:
    """Whether any outcome revision of the model was received after ``as_of``."""
    return conn.execute(
        select(OutcomeRevision.id)
        .where(OutcomeRevision.model_id == model_id, OutcomeRevision.received_at > as_of)
        .limit(1)
    ).first() is not None


def known_rows(conn: Connection, model_id: int, start: datetime, end: datetime, as_of: datetime,
               *, version: str | None = None) -> KnownRows:
    """Predictions scored in [start, end) and received by ``as_of``, with their labels as of then.

    When no revision arrived after ``as_of`` the current label is the label as of then, and
    the join reads ``outcomes`` directly (the common case: a report of the present).
    """
    if revisions_after(conn, model_id, as_of):
        earlier = aliased(OutcomeRevision)
        latest = (
            select(func.max(earlier.revision))
            .where(earlier.model_id == Prediction.model_id, earlier.case_id == Prediction.case_id,
                   earlier.received_at <= as_of)
            .correlate(Prediction)
            .scalar_subquery()
        )
        label_source = OutcomeRevision
        join_on = and_(OutcomeRevision.model_id == Prediction.model_id,
                       OutcomeRevision.case_id == Prediction.case_id,
                       OutcomeRevision.revision == latest)
        label_column = OutcomeRevision.label
    else:
        label_source = Outcome  # type: ignore[assignment]  # both mapped classes have model_id, case_id
        join_on = and_(Outcome.model_id == Prediction.model_id, Outcome.case_id == Prediction.case_id)
        label_column = Outcome.label
    query = (
        select(Prediction.probability, label_column, _epoch_seconds(conn, Prediction.scored_at),
               Prediction.version, Prediction.tags)
        .select_from(Prediction)
        .outerjoin(label_source, join_on)
        .where(Prediction.model_id == model_id, Prediction.scored_at >= start, Prediction.scored_at < end,
               Prediction.received_at <= as_of)
        .order_by(Prediction.case_id, Prediction.version)
    )
    if version is not None:
        query = query.where(Prediction.version == version)
    parts: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[str | None]]] = []
    for p, y, t, v, g in _chunks(conn, query):
        parts.append((p, y, t, v, g))
    if not parts:
        return KnownRows(np.empty(0), np.empty(0, np.int8), np.empty(0, np.int64), np.empty(0, object), [])
    return KnownRows(
        np.concatenate([x[0] for x in parts]),
        np.concatenate([x[1] for x in parts]),
        np.concatenate([x[2] for x in parts]),
        np.concatenate([x[3] for x in parts]),
        [tag for x in parts for tag in x[4]],
    )


def _chunks(conn: Connection, query: Any) -> Iterator[
        tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[str | None]]]:
    # Options on the statement, not the connection: Connection.execution_options changes the
    # connection in place, and a server-side cursor would then wrap the caller's later INSERTs.
    result = conn.execute(query.execution_options(yield_per=CHUNK_ROWS))
    for rows in result.partitions(CHUNK_ROWS):
        p, y, t, v, g = zip(*rows, strict=True)
        yield (
            np.asarray(p, dtype=np.float64),
            np.asarray([-1 if value is None else value for value in y], dtype=np.int8),
            np.asarray(t, dtype=np.int64),
            np.asarray(v, dtype=object),
            list(g),
        )


@dataclass(frozen=True, slots=True)
class ArrivedLater:
    """Data for a span that reached the service after ``as_of``."""

    predictions: int  # predictions scored in the span, received after as_of
    first_labels: int  # cases of the span whose first label arrived after as_of
    corrections: int  # label revisions after the first, received after as_of


def arrived_after(conn: Connection, model_id: int, start: datetime, end: datetime,
                  as_of: datetime) -> ArrivedLater:
    late_predictions = conn.execute(
        select(func.count()).select_from(Prediction).where(
            Prediction.model_id == model_id, Prediction.scored_at >= start, Prediction.scored_at < end,
            Prediction.received_at > as_of)
    ).scalar_one()
    in_span = (
        select(Prediction.case_id)
        .where(Prediction.model_id == OutcomeRevision.model_id, Prediction.case_id == OutcomeRevision.case_id,
               Prediction.scored_at >= start, Prediction.scored_at < end)
        .correlate(OutcomeRevision)
        .exists()
    )
    first, total = conn.execute(
        select(func.coalesce(func.sum(case((OutcomeRevision.revision == 1, 1), else_=0)), 0), func.count())
        .where(OutcomeRevision.model_id == model_id, OutcomeRevision.received_at > as_of, in_span)
    ).one()
    return ArrivedLater(int(late_predictions), int(first), int(total) - int(first))
