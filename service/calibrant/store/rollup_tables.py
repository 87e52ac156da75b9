"""Tables of the rollup: hourly and daily summaries, their dirty marks, segment values, references.

A bucket is (model, version, hour of scored_at). Ingest marks a bucket dirty
with a generation number; the refresh claims it, recomputes every segment's
summary of that hour from raw rows, and removes the mark only if the
generation is still the one it read — so rows ingested during a refresh are
never lost, only recomputed once more.

The daily tier works the same way one level up: storing an hour's summaries
marks its UTC day dirty in the same transaction, and the refresh then merges
the day's stored hours into one summary per segment. Long-range queries read
days instead of 24 times as many hours.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import Index, Integer, LargeBinary, String
from sqlalchemy.orm import Mapped, mapped_column

from calibrant.store.tables import Base
from calibrant.store.types import BigIntPK

OTHER_VALUE = "other"  # where values beyond a key's first MAX_SEGMENT_VALUES go
MAX_SEGMENT_VALUES = 50


class _SummaryRow:
    """Columns every summary tier has; the tier adds its time column to the key."""

    model_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    version: Mapped[str] = mapped_column(String(64), primary_key=True)
    segment_key: Mapped[str] = mapped_column(String(64), primary_key=True)
    segment_value: Mapped[str] = mapped_column(String(128), primary_key=True)
    n: Mapped[int] = mapped_column(Integer)
    payload: Mapped[bytes] = mapped_column(LargeBinary)
    computed_at: Mapped[datetime]


class _DirtyMark:
    """Columns of a dirty mark (``store.dirty``); the tier adds its time column to the key."""

    model_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    version: Mapped[str] = mapped_column(String(64), primary_key=True)
    generation: Mapped[int] = mapped_column(Integer, default=1)
    marked_at: Mapped[datetime]
    claimed_by: Mapped[str | None] = mapped_column(String(64), nullable=True)
    claimed_until: Mapped[datetime | None] = mapped_column(nullable=True)


class BucketSummary(_SummaryRow, Base):
    """The mergeable summary (``stats.summary.Summary.to_bytes``) of one segment-hour."""

    __tablename__ = "bucket_summaries"

    hour: Mapped[datetime] = mapped_column(primary_key=True)

    # The second index serves statements that name the hour but not the segment (replacing a
    # bucket's summaries, merging a day): the primary key puts the segment before the hour.
    __table_args__ = (Index(None, "model_id", "segment_key", "segment_value", "hour"),
                      Index(None, "model_id", "version", "hour"))


class DirtyBucket(_DirtyMark, Base):
    """A bucket whose raw rows changed since its summaries were computed."""

    __tablename__ = "dirty_buckets"

    hour: Mapped[datetime] = mapped_column(primary_key=True)


class DaySummary(_SummaryRow, Base):
    """The merge of one UTC day's hourly summaries of a segment (same bytes format)."""

    __tablename__ = "day_summaries"

    day: Mapped[datetime] = mapped_column(primary_key=True)

    __table_args__ = (Index(None, "model_id", "segment_key", "segment_value", "day"),
                      Index(None, "model_id", "version", "day"))


class DirtyDay(_DirtyMark, Base):
    """A day whose hourly summaries changed since its day summaries were merged."""

    __tablename__ = "dirty_days"

    day: Mapped[datetime] = mapped_column(primary_key=True)


class SegmentValue(Base):
    """The values a declared segment key keeps summaries for, in order of first sight."""

    __tablename__ = "segment_values"

    model_id: Mapped[int] = mapped_column(Integer, primary_key=True)
    segment_key: Mapped[str] = mapped_column(String(64), primary_key=True)
    segment_value: Mapped[str] = mapped_column(String(128), primary_key=True)
    first_seen: Mapped[datetime]


class ReferenceSample(Base):
    """An uploaded validation set (probabilities and labels), kept apart from live traffic."""

    __tablename__ = "reference_samples"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    model_id: Mapped[int] = mapped_column(Integer, unique=True)
    n: Mapped[int] = mapped_column(Integer)
    payload: Mapped[bytes] = mapped_column(LargeBinary)  # Summary bytes of the set
    description: Mapped[str] = mapped_column(String(500), default="")
    uploaded_at: Mapped[datetime]


class JobRun(Base):
    """One run of a scheduled job: when, by whom, what it did (for freshness and audit)."""

    __tablename__ = "job_runs"

    id: Mapped[int] = mapped_column(BigIntPK, primary_key=True, autoincrement=True)
    job: Mapped[str] = mapped_column(String(64))
    worker: Mapped[str] = mapped_column(String(64))
    started_at: Mapped[datetime]
    finished_at: Mapped[datetime]
    units: Mapped[int] = mapped_column(Integer, default=0)
    rows: Mapped[int] = mapped_column(Integer, default=0)

    __table_args__ = (Index(None, "job", "finished_at"),)
