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
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import Connection

from calibrant.store.dirty import Claim, KeyT, Tier, claim, finish

_POSTGRES_BATCH = 5000  # keys per statement: bounds the size of one IN list


def claim_many(conn: Connection, tier: Tier[KeyT], keys: Sequence[KeyT], worker: str, now: datetime,
               lease: timedelta) -> list[Claim[KeyT]]:
    """Claims of those ``keys`` no other worker holds a live lease on, in key order."""
    ordered = sorted(set(keys))
    if conn.dialect.name != "postgresql":
        return [c for c in (claim(conn, k, worker, now, lease) for k in ordered) if c is not None]
    table, when = tier.table.name, tier.time_column
    out: list[Claim[KeyT]] = []
    for i in range(0, len(ordered), _POSTGRES_BATCH):
        params = _key_arrays(ordered[i:i + _POSTGRES_BATCH])
        params.update(now=now, worker=worker, until=now + lease)
        # Lock in key order first (see the module's note), then take the free ones.
        rows = conn.exec_driver_sql(
            f"WITH wanted AS (SELECT d.model_id, d.version, d.{when} FROM {table} d "  # noqa: S608 — names are constants
            f"JOIN {_KEYS} ON d.model_id = k.m AND d.version = k.v AND d.{when} = k.t "
            "WHERE d.claimed_until IS NULL OR d.claimed_until < %(now)s "
            f"ORDER BY d.model_id, d.version, d.{when} FOR UPDATE OF d) "
            f"UPDATE {table} d SET claimed_by = %(worker)s, claimed_until = %(until)s FROM wanted "
            f"WHERE d.model_id = wanted.model_id AND d.version = wanted.version AND d.{when} = wanted.{when} "
            f"RETURNING d.model_id, d.version, d.{when}, d.generation",
            params,
        )
        out += [Claim(tier.key_type(m, v, _utc(w)), int(g), worker) for m, v, w, g in rows]
    return sorted(out, key=lambda c: c.key)


def finish_many(conn: Connection, tier: Tier[KeyT], claims: Sequence[Claim[KeyT]]) -> dict[KeyT, bool]:
    """Clear each mark whose generation is unchanged; release the others. True per clean key."""
    if conn.dialect.name != "postgresql":
        return {c.key: finish(conn, c) for c in sorted(claims, key=lambda c: c.key)}
    table, when = tier.table.name, tier.time_column
    out: dict[KeyT, bool] = {}
    by_worker: dict[str, list[Claim[KeyT]]] = defaultdict(list)
    for c in claims:
        by_worker[c.worker].append(c)
    for worker, mine in by_worker.items():
        mine.sort(key=lambda c: c.key)
        for i in range(0, len(mine), _POSTGRES_BATCH):
            part = mine[i:i + _POSTGRES_BATCH]
            params = _key_arrays([c.key for c in part])
            params.update(worker=worker, generations=[c.generation for c in part])
            held = (f"FROM {_KEYS_WITH_GENERATION} WHERE d.model_id = k.m AND d.version = k.v "
                    f"AND d.{when} = k.t AND d.claimed_by = %(worker)s")
            conn.exec_driver_sql(
                f"SELECT d.model_id FROM {table} d JOIN {_KEYS_WITH_GENERATION} ON d.model_id = k.m "  # noqa: S608 — names are constants
                f"AND d.version = k.v AND d.{when} = k.t WHERE d.claimed_by = %(worker)s "
                f"ORDER BY d.model_id, d.version, d.{when} FOR UPDATE OF d", params)
            cleared = {tier.key_type(m, v, _utc(w)) for m, v, w in conn.exec_driver_sql(
                f"DELETE FROM {table} d USING {held.removeprefix('FROM ')} AND d.generation = k.g "  # noqa: S608 — names are constants
                f"RETURNING d.model_id, d.version, d.{when}", params)}
            conn.exec_driver_sql(
                f"UPDATE {table} d SET claimed_by = NULL, claimed_until = NULL {held}", params)  # noqa: S608 — names are constants
            out.update({c.key: c.key in cleared for c in part})
    return out


_KEYS = "unnest(%(models)s::int[], %(versions)s::text[], %(times)s::timestamptz[]) AS k(m, v, t)"
_KEYS_WITH_GENERATION = ("unnest(%(models)s::int[], %(versions)s::text[], %(times)s::timestamptz[], "
                         "%(generations)s::int[]) AS k(m, v, t, g)")


def _key_arrays(keys: Sequence[Any]) -> dict[str, Any]:
    return {"models": [k.model_id for k in keys], "versions": [k.version for k in keys],
            "times": [k.start for k in keys]}


def _utc(instant: datetime) -> datetime:
    return instant.astimezone(UTC)
