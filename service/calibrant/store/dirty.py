"""Dirty marks on buckets: set by ingest, claimed and cleared by the refresh.

Every statement that touches ``dirty_buckets`` lives here, so the protocol
(mark → claim → recompute → clear-if-generation-unchanged) reads in one place.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime, timedelta

from sqlalchemy import Connection, and_, delete, func, or_, select, update
from sqlalchemy.dialects.postgresql import insert as postgresql_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert

from calibrant.store.rollup_tables import ALL_SEGMENT, BucketSummary, DirtyBucket

_INSERT = {"postgresql": postgresql_insert, "sqlite": sqlite_insert}
_T = DirtyBucket.__table__


def hour_of(instant: datetime) -> datetime:
    return instant.replace(minute=0, second=0, microsecond=0)


@dataclass(frozen=True, slots=True, order=True)
class BucketKey:
    model_id: int
    version: str
    hour: datetime


@dataclass(frozen=True, slots=True)
class Claim:
    key: BucketKey
    generation: int
    worker: str


def mark(conn: Connection, keys: Iterable[BucketKey], now: datetime) -> int:
    """Mark buckets dirty, bumping the generation of ones already marked.

    Keys are written in sorted order so that concurrent ingests touching the
    same buckets take their row locks in the same order (no deadlock).
    """
    rows = [
        {"model_id": k.model_id, "version": k.version, "hour": k.hour, "generation": 1, "marked_at": now}
        for k in sorted(set(keys))
    ]
    if not rows:
        return 0
    stmt = _INSERT[conn.dialect.name](_T)
    stmt = stmt.on_conflict_do_update(
        index_elements=["model_id", "version", "hour"],
        set_={"generation": _T.c.generation + 1, "marked_at": stmt.excluded.marked_at},
    )
    conn.execute(stmt, rows)
    return len(rows)


def mark_whole_model(conn: Connection, model_id: int, now: datetime) -> int:
    """Mark every bucket of a model dirty (its summary settings changed)."""
    keys = conn.execute(
        select(BucketSummary.version, BucketSummary.hour).where(
            BucketSummary.model_id == model_id, BucketSummary.segment_key == ALL_SEGMENT
        )
    )
    return mark(conn, (BucketKey(model_id, v, h) for v, h in keys), now)


def candidates(conn: Connection, now: datetime, limit: int) -> list[BucketKey]:
    """Unclaimed (or lease-expired) dirty buckets, oldest hour first."""
    rows = conn.execute(
        select(_T.c.model_id, _T.c.version, _T.c.hour)
        .where(or_(_T.c.claimed_until.is_(None), _T.c.claimed_until < now))
        .order_by(_T.c.hour, _T.c.model_id, _T.c.version)
        .limit(limit)
    )
    return [BucketKey(m, v, h) for m, v, h in rows]


def _key_clause(key: BucketKey):
    return and_(_T.c.model_id == key.model_id, _T.c.version == key.version, _T.c.hour == key.hour)


def claim(conn: Connection, key: BucketKey, worker: str, now: datetime, lease: timedelta) -> Claim | None:
    """Take the bucket for ``worker`` unless another worker holds a live lease.

    One conditional UPDATE: on PostgreSQL a concurrent claimer blocks on the row
    and then re-checks the condition, so exactly one of them gets a row back. The
    generation returned is what the recomputation answers for: a later ingest bumps
    it and so keeps the mark.
    """
    result = conn.execute(
        update(_T)
        .where(
            _key_clause(key),
            or_(_T.c.claimed_until.is_(None), _T.c.claimed_until < now),
        )
        .values(claimed_by=worker, claimed_until=now + lease)
        .returning(_T.c.generation)
    )
    row = result.first()
    return None if row is None else Claim(key, int(row[0]), worker)


def finish(conn: Connection, claim_: Claim) -> bool:
    """Clear the mark if its generation is unchanged; else release it for another pass.

    Returns True when the bucket is clean.
    """
    cleared = conn.execute(
        delete(_T).where(
            _key_clause(claim_.key),
            _T.c.generation == claim_.generation,
            _T.c.claimed_by == claim_.worker,
        )
    ).rowcount
    if cleared:
        return True
    conn.execute(
        update(_T)
        .where(_key_clause(claim_.key), _T.c.claimed_by == claim_.worker)
        .values(claimed_by=None, claimed_until=None)
    )
    return False


def backlog(conn: Connection) -> int:
    """How many buckets wait for a refresh."""
    return int(conn.execute(select(func.count()).select_from(_T)).scalar() or 0)
