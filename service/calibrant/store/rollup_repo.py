"""All SQL of the rollup: raw rows of a bucket, summaries in and out (hourly and daily tiers),
segment values, job runs."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime, timedelta

import numpy as np
from sqlalchemy import Connection, delete, func, insert, select

from calibrant.store.dirty import BucketKey, DayKey, Key
from calibrant.store.event_label import counted_label
from calibrant.store.rollup_tables import (
    BucketSummary,
    DaySummary,
    JobRun,
    ReferenceSample,
    SegmentValue,
)
from calibrant.store.tables import Model, Outcome, Prediction
from calibrant.store.upsert import insert_for

HOUR = timedelta(hours=1)
DAY = timedelta(days=1)
# Summary table and its time column, per key type.
_TIER_TABLE: dict[type[Key], tuple[type[BucketSummary] | type[DaySummary], str]] = {
    BucketKey: (BucketSummary, "hour"), DayKey: (DaySummary, "day")
}


@dataclass(frozen=True, slots=True)
class RawChunk:
    probability: np.ndarray  # float64
    label: np.ndarray  # int8: 1, 0, or -1 when no outcome yet
    tags: list[str | None]  # canonical JSON per row


def bucket_rows(conn: Connection, key: BucketKey, chunk_rows: int,
                horizon_days: int | None = None) -> Iterator[RawChunk]:
    """The bucket's predictions joined with their outcomes, ``chunk_rows`` at a time.

    With a horizon, an event that happened after it is read as a 0 (``event_label``).
    """
    query = (
        select(Prediction.probability, counted_label(conn, horizon_days), Prediction.tags)
        .select_from(Prediction)
        .outerjoin(
            Outcome,
            (Outcome.model_id == Prediction.model_id) & (Outcome.case_id == Prediction.case_id),
        )
        .where(
            Prediction.model_id == key.model_id,
            Prediction.version == key.version,
            Prediction.scored_at >= key.hour,
            Prediction.scored_at < key.hour + HOUR,
        )
    )
    result = conn.execution_options(yield_per=chunk_rows).execute(query)
    for rows in result.partitions(chunk_rows):
        p, y, t = zip(*rows, strict=True)
        yield RawChunk(
            np.asarray(p, dtype=np.float64),
            np.asarray([-1 if v is None else v for v in y], dtype=np.int8),
            list(t),
        )


def replace_summaries(
    conn: Connection, key: Key, summaries: dict[tuple[str, str], tuple[int, bytes]], now: datetime
) -> None:
    """Make the bucket's (or day's) stored summaries exactly ``summaries`` (vanished segments go)."""
    table, column = _TIER_TABLE[type(key)]
    conn.execute(
        delete(table).where(
            table.model_id == key.model_id,
            table.version == key.version,
            getattr(table, column) == key.start,
        )
    )
    if summaries:
        conn.execute(
            insert(table),
            [
                {
                    "model_id": key.model_id,
                    "version": key.version,
                    "segment_key": seg_key,
                    "segment_value": seg_value,
                    column: key.start,
                    "n": n,
                    "payload": payload,
                    "computed_at": now,
                }
                for (seg_key, seg_value), (n, payload) in sorted(summaries.items())
            ],
        )


def pruned_before(conn: Connection, model_id: int) -> datetime | None:
    """The model's retention boundary: hours before it are sealed (raw rows removed)."""
    return conn.execute(select(Model.pruned_before).where(Model.id == model_id)).scalar()


def horizon_days(conn: Connection, model_id: int) -> int | None:
    return conn.execute(select(Model.outcome_horizon_days).where(Model.id == model_id)).scalar()


def segment_keys(conn: Connection, model_id: int) -> list[str]:
    """The tag keys the model keeps segment summaries for, as its settings declare them."""
    keys = conn.execute(select(Model.segment_keys).where(Model.id == model_id)).scalar()
    return list(keys or [])


def segment_values(conn: Connection, model_id: int) -> dict[str, list[str]]:
    rows = conn.execute(
        select(SegmentValue.segment_key, SegmentValue.segment_value)
        .where(SegmentValue.model_id == model_id)
        .order_by(SegmentValue.first_seen, SegmentValue.segment_value)
    )
    out: dict[str, list[str]] = {}
    for k, v in rows:
        out.setdefault(k, []).append(v)
    return out


def add_segment_values(conn: Connection, model_id: int, key: str, values: list[str], now: datetime) -> None:
    """Record newly seen values; a value another refresher recorded first is kept as it is."""
    if values:
        conn.execute(
            insert_for(conn.dialect.name, SegmentValue).on_conflict_do_nothing(),
            [
                {"model_id": model_id, "segment_key": key, "segment_value": v, "first_seen": now}
                for v in values
            ],
        )


@dataclass(frozen=True, slots=True)
class StoredSummary:
    start: datetime  # the hour, or the day, the summary covers
    version: str
    payload: bytes


def summaries_between(
    conn: Connection,
    model_id: int,
    start: datetime,
    end: datetime,
    *,
    segment: tuple[str, str],
    version: str | None,
    daily: bool = False,
) -> list[StoredSummary]:
    """Hourly (or, with ``daily``, day) summaries starting in [start, end), of one version or all."""
    table, column = _TIER_TABLE[DayKey if daily else BucketKey]
    when = getattr(table, column)
    query = select(when, table.version, table.payload).where(
        table.model_id == model_id,
        table.segment_key == segment[0],
        table.segment_value == segment[1],
        when >= start,
        when < end,
    )
    if version is not None:
        query = query.where(table.version == version)
    return [StoredSummary(h, v, bytes(p)) for h, v, p in conn.execute(query.order_by(when))]


def hours_of_day(conn: Connection, key: DayKey) -> list[tuple[str, str, bytes]]:
    """Every segment's hourly summaries of one (model, version, day): (key, value, payload)."""
    rows = conn.execute(
        select(BucketSummary.segment_key, BucketSummary.segment_value, BucketSummary.payload).where(
            BucketSummary.model_id == key.model_id,
            BucketSummary.version == key.version,
            BucketSummary.hour >= key.day,
            BucketSummary.hour < key.day + DAY,
        )
    )
    return [(k, v, bytes(p)) for k, v, p in rows]


def reference_sample(conn: Connection, model_id: int) -> bytes | None:
    row = conn.execute(
        select(ReferenceSample.payload).where(ReferenceSample.model_id == model_id)
    ).first()
    return None if row is None else bytes(row[0])


def save_reference_sample(
    conn: Connection, model_id: int, n: int, payload: bytes, description: str, now: datetime
) -> None:
    conn.execute(delete(ReferenceSample).where(ReferenceSample.model_id == model_id))
    conn.execute(
        insert(ReferenceSample).values(
            model_id=model_id, n=n, payload=payload, description=description, uploaded_at=now
        )
    )


def record_job_run(
    conn: Connection, job: str, worker: str, started: datetime, finished: datetime, units: int, rows: int
) -> None:
    conn.execute(
        insert(JobRun).values(
            job=job, worker=worker, started_at=started, finished_at=finished, units=units, rows=rows
        )
    )


def last_job_run(conn: Connection, job: str) -> datetime | None:
    return conn.execute(select(func.max(JobRun.finished_at)).where(JobRun.job == job)).scalar()
