"""Dirty marks, set when data changes, claimed and cleared by the refresh.

Two tiers use the same protocol (mark → claim → recompute → clear if the
generation is unchanged): hourly buckets, marked by ingest and rebuilt from raw
rows, and days, marked when one of their hours is stored and rebuilt by merging
those hours. Every statement on ``dirty_buckets`` and ``dirty_days`` lives here,
so the protocol reads in one place (``store.dirty_bulk`` holds the same claim and clear for
many keys per statement); the key type says which table a call means.
"""

from __future__ import annotations

from collections.abc import Collection, Iterable
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any, Generic, TypeVar, cast, overload

from sqlalchemy import ColumnElement, Connection, Table, and_, delete, func, or_, select, update

from calibrant.store.rollup_tables import BucketSummary, DirtyBucket, DirtyDay
from calibrant.store.tables import Model
from calibrant.store.upsert import insert_for
from calibrant.vocabulary.segments import ALL_SEGMENT


def hour_of(instant: datetime) -> datetime:
    return instant.replace(minute=0, second=0, microsecond=0)


def day_of(instant: datetime) -> datetime:
    return instant.replace(hour=0, minute=0, second=0, microsecond=0)


@dataclass(frozen=True, slots=True, order=True)
class BucketKey:
    model_id: int
    version: str
    hour: datetime

    @property
    def start(self) -> datetime:
        return self.hour


@dataclass(frozen=True, slots=True, order=True)
class DayKey:
    model_id: int
    version: str
    day: datetime

    @property
    def start(self) -> datetime:
        return self.day


Key = BucketKey | DayKey
KeyT = TypeVar("KeyT", bound=Key)  # one tier's key type, kept through a claim


@dataclass(frozen=True, slots=True)
class Tier(Generic[KeyT]):
    """Where the marks of one key type live."""

    table: Table
    time_column: str
    key_type: type[KeyT]


# A declarative class's __table__ is typed as any FromClause; with __tablename__ it is a Table.
HOURS: Tier[BucketKey] = Tier(cast(Table, DirtyBucket.__table__), "hour", BucketKey)
DAYS: Tier[DayKey] = Tier(cast(Table, DirtyDay.__table__), "day", DayKey)


def _tier(key: Key) -> Tier[BucketKey] | Tier[DayKey]:
    return DAYS if isinstance(key, DayKey) else HOURS


@dataclass(frozen=True, slots=True)
class Claim(Generic[KeyT]):
    key: KeyT
    generation: int
    worker: str


def mark(conn: Connection, keys: Iterable[KeyT], now: datetime) -> int:
    """Mark buckets (or days) dirty, bumping the generation of ones already marked.

    Keys are written in sorted order so that concurrent writers touching the
    same marks take their row locks in the same order (no deadlock).
    """
    ordered = sorted(set(keys))
    if not ordered:
        return 0
    tier = _tier(ordered[0])
    rows = [
        {"model_id": k.model_id, "version": k.version, tier.time_column: k.start, "generation": 1,
         "marked_at": now}
        for k in ordered
    ]
    t = tier.table
    stmt = insert_for(conn.dialect.name, t)
    stmt = stmt.on_conflict_do_update(
        index_elements=["model_id", "version", tier.time_column],
        set_={"generation": t.c.generation + 1, "marked_at": stmt.excluded.marked_at},
    )
    conn.execute(stmt, rows)
    return len(rows)


def mark_whole_model(conn: Connection, model_id: int, now: datetime) -> int:
    """Mark every retained bucket of a model dirty (its summary settings changed).

    Buckets before the model's retention boundary are left alone: their raw rows are gone, so
    their summaries stay as computed under the earlier settings (``store.retention_repo``).
    """
    query = select(BucketSummary.version, BucketSummary.hour).where(
        BucketSummary.model_id == model_id, BucketSummary.segment_key == ALL_SEGMENT
    )
    sealed = conn.execute(select(Model.pruned_before).where(Model.id == model_id)).scalar()
    if sealed is not None:
        query = query.where(BucketSummary.hour >= sealed)
    return mark(conn, (BucketKey(model_id, v, h) for v, h in conn.execute(query)), now)


@overload
def candidates(conn: Connection, now: datetime, limit: int, *,
               skip_models: Collection[int] = ...) -> list[BucketKey]: ...
@overload
def candidates(conn: Connection, now: datetime, limit: int, tier: Tier[KeyT], *,
               skip_models: Collection[int] = ...) -> list[KeyT]: ...
def candidates(conn: Connection, now: datetime, limit: int, tier: Tier[Any] = HOURS, *,
               skip_models: Collection[int] = ()) -> list[Any]:
    """Unclaimed (or lease-expired) marks of ``tier``, oldest first.

    ``skip_models`` are models the refresh holds back (``models.isolation``): leaving them
    out here keeps their marks from filling every batch while the others wait.
    """
    t = tier.table
    when = t.c[tier.time_column]
    query = select(t.c.model_id, t.c.version, when).where(
        or_(t.c.claimed_until.is_(None), t.c.claimed_until < now)
    )
    if skip_models:
        query = query.where(t.c.model_id.not_in(sorted(skip_models)))
    rows = conn.execute(query.order_by(when, t.c.model_id, t.c.version).limit(limit))
    return [tier.key_type(m, v, h) for m, v, h in rows]


def _key_clause(key: Key) -> ColumnElement[bool]:
    tier = _tier(key)
    t = tier.table
    return and_(t.c.model_id == key.model_id, t.c.version == key.version,
                t.c[tier.time_column] == key.start)


def claim(conn: Connection, key: KeyT, worker: str, now: datetime, lease: timedelta) -> Claim[KeyT] | None:
    """Take the bucket for ``worker`` unless another worker holds a live lease.

    One conditional UPDATE: on PostgreSQL a concurrent claimer blocks on the row
    and then re-checks the condition, so exactly one of them gets a row back. The
    generation returned is what the recomputation answers for: a later ingest bumps
    it and so keeps the mark.
    """
    t = _tier(key).table
    result = conn.execute(
        update(t)
        .where(
            _key_clause(key),
            or_(t.c.claimed_until.is_(None), t.c.claimed_until < now),
        )
        .values(claimed_by=worker, claimed_until=now + lease)
        .returning(t.c.generation)
    )
    row = result.first()
    return None if row is None else Claim(key, int(row[0]), worker)


def finish(conn: Connection, claim_: Claim[KeyT]) -> bool:
    """Clear the mark if its generation is unchanged; else release it for another pass.

    Returns True when the bucket (or day) is clean.
    """
    t = _tier(claim_.key).table
    cleared = conn.execute(
        delete(t).where(
            _key_clause(claim_.key),
            t.c.generation == claim_.generation,
            t.c.claimed_by == claim_.worker,
        )
    ).rowcount
    if cleared:
        return True
    conn.execute(
        update(t)
        .where(_key_clause(claim_.key), t.c.claimed_by == claim_.worker)
        .values(claimed_by=None, claimed_until=None)
    )
    return False


def release(conn: Connection, claims: Iterable[Claim[Any]]) -> None:
    """Give claims back without clearing their marks (the work failed): the next pass may take them."""
    for claim_ in claims:
        t = _tier(claim_.key).table
        conn.execute(
            update(t)
            .where(_key_clause(claim_.key), t.c.claimed_by == claim_.worker)
            .values(claimed_by=None, claimed_until=None)
        )


def backlog(conn: Connection, tier: Tier[Any] = HOURS) -> int:
    """How many marks of ``tier`` wait for a refresh."""
    return int(conn.execute(select(func.count()).select_from(tier.table)).scalar() or 0)


def backlog_by_model(conn: Connection) -> dict[int, int]:
    """Hour marks waiting for a refresh, per model id (a refresh job's totals)."""
    t = DirtyBucket.__table__.c
    rows = conn.execute(select(t.model_id, func.count()).group_by(t.model_id))
    return {int(model_id): int(n) for model_id, n in rows}


def hours_pending(conn: Connection, day: DayKey) -> bool:
    """Whether some hour of the day still waits for its recomputation (merge the day after it)."""
    t = HOURS.table
    return conn.execute(
        select(t.c.hour).where(
            t.c.model_id == day.model_id,
            t.c.version == day.version,
            t.c.hour >= day.day,
            t.c.hour < day.day + timedelta(days=1),
        ).limit(1)
    ).first() is not None


def dirty_days(conn: Connection, model_id: int, start: datetime, end: datetime) -> set[datetime]:
    """Days in [start, end) with a mark for any version: their day summaries may be stale."""
    t = DAYS.table
    rows = conn.execute(
        select(t.c.day).where(t.c.model_id == model_id, t.c.day >= start, t.c.day < end).distinct()
    )
    return {d for (d,) in rows}
