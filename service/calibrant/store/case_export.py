"""Cases for a file export: each prediction in a range with its outcome, read in batches."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import datetime
from typing import Any

from sqlalchemy import JSON, ColumnElement, cast, func, select

from calibrant.store.tables import Outcome, Prediction
from calibrant.store.unit import Session

CASE_COLUMNS = ("id", "version", "probability", "scored_at", "tags", "label", "observed_at", "occurred_at")


def _tag_value(dialect: str, key: str) -> ColumnElement[Any]:
    if dialect == "postgresql":
        return func.json_extract_path_text(cast(Prediction.tags, JSON), key)
    return func.json_extract(Prediction.tags, f'$."{key}"')


def case_batches(
    session: Session, model_id: int, *, start: datetime, end: datetime, version: str | None,
    tag: tuple[str, str] | None, batch: int,
) -> Iterator[list[tuple[Any, ...]]]:
    """Rows of ``CASE_COLUMNS`` (the outcome's columns None while unlabelled), scored in
    [start, end), oldest first, ``batch`` at a time through a server-side cursor."""
    query = (
        select(Prediction.case_id, Prediction.version, Prediction.probability, Prediction.scored_at,
               Prediction.tags, Outcome.label, Outcome.observed_at, Outcome.occurred_at)
        .outerjoin(Outcome, (Outcome.model_id == Prediction.model_id)
                   & (Outcome.case_id == Prediction.case_id))
        .where(Prediction.model_id == model_id, Prediction.scored_at >= start, Prediction.scored_at < end)
        .order_by(Prediction.scored_at, Prediction.case_id, Prediction.version)
    )
    if version is not None:
        query = query.where(Prediction.version == version)
    if tag is not None:
        dialect = session.get_bind().dialect.name
        query = query.where(_tag_value(dialect, tag[0]) == tag[1])
    result = session.execute(query.execution_options(yield_per=batch))
    for part in result.partitions():
        yield [tuple(row) for row in part]
