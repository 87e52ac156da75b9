"""The claim protocol of ``store.dirty`` for many marks at once (the set-based refresh).

Same conditions as :func:`dirty.claim` and :func:`dirty.finish`, one statement
for a set of keys instead of one per key: a mark is taken only if unclaimed or
its lease has expired, and cleared only if its generation is still the one
claimed and this worker holds it; otherwise its claim is released and it stays
dirty for the next pass.

Lock order: marks are locked in ascending key order (``SELECT ... ORDER BY ...
FOR UPDATE`` on PostgreSQL, before the UPDATE or DELETE touches them), the
order ``dirty.mark`` uses, so a refresher and an ingest marking the same hours
cannot deadlock. SQLite has one writer at a time and needs no order.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Sequence
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import Connection, and_, delete, or_, select, tuple_, update

from calibrant.store.dirty import Claim, KeyT, Tier, claim, finish

_POSTGRES_BATCH = 5000  # keys per statement: bounds the size of one IN list


def claim_many(conn: Connection, tier: Tier[KeyT], keys: Sequence[KeyT], worker: str, now: datetime,
               lease: timedelta) -> list[Claim[KeyT]]:
    """Claims of those ``keys`` no other worker holds a live lease on, in key order."""
    ordered = sorted(set(keys))
    if conn.dialect.name != "postgresql":
        return [c for c in (claim(conn, k, worker, now, lease) for k in ordered) if c is not None]
    t = tier.table
    when = t.c[tier.time_column]
    out: list[Claim[KeyT]] = []
    for i in range(0, len(ordered), _POSTGRES_BATCH):
        part = ordered[i:i + _POSTGRES_BATCH]
        free = or_(t.c.claimed_until.is_(None), t.c.claimed_until < now)
        wanted = and_(_in_keys(tier, part), free)
        conn.execute(select(t.c.model_id).where(wanted)
                     .order_by(t.c.model_id, t.c.version, when).with_for_update())
        rows = conn.execute(
            update(t).where(wanted).values(claimed_by=worker, claimed_until=now + lease)
            .returning(t.c.model_id, t.c.version, when, t.c.generation)
        )
        out += [Claim(tier.key_type(m, v, w), int(g), worker) for m, v, w, g in rows]
    return sorted(out, key=lambda c: c.key)


def finish_many(conn: Connection, tier: Tier[KeyT], claims: Sequence[Claim[KeyT]]) -> dict[KeyT, bool]:
    """Clear each mark whose generation is unchanged; release the others. True per clean key."""
    if conn.dialect.name != "postgresql":
        return {c.key: finish(conn, c) for c in sorted(claims, key=lambda c: c.key)}
    t = tier.table
    when = t.c[tier.time_column]
    out: dict[KeyT, bool] = {}
    by_worker: dict[str, list[Claim[KeyT]]] = defaultdict(list)
    for c in claims:
        by_worker[c.worker].append(c)
    for worker, mine in by_worker.items():
        mine.sort(key=lambda c: c.key)
        for i in range(0, len(mine), _POSTGRES_BATCH):
            part = mine[i:i + _POSTGRES_BATCH]
            held = and_(_in_keys(tier, [c.key for c in part]), t.c.claimed_by == worker)
            conn.execute(select(t.c.model_id).where(held)
                         .order_by(t.c.model_id, t.c.version, when).with_for_update())
            same = tuple_(t.c.model_id, t.c.version, when, t.c.generation).in_(
                [(c.key.model_id, c.key.version, c.key.start, c.generation) for c in part])
            cleared = {tier.key_type(m, v, w) for m, v, w in conn.execute(
                delete(t).where(held, same).returning(t.c.model_id, t.c.version, when))}
            conn.execute(update(t).where(held).values(claimed_by=None, claimed_until=None))
            out.update({c.key: c.key in cleared for c in part})
    return out


def _in_keys(tier: Tier[Any], keys: Sequence[Any]) -> Any:
    t = tier.table
    return tuple_(t.c.model_id, t.c.version, t.c[tier.time_column]).in_(
        [(k.model_id, k.version, k.start) for k in keys])
