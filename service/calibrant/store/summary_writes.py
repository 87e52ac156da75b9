"""Summaries of many buckets (or days) written at once, and the hours of many days read at once.

The per-bucket path (``rollup_repo.replace_summaries``) costs a DELETE and an
INSERT per bucket; here one DELETE removes the old summaries of every key of
the batch and the new rows go in together: binary ``COPY ... FROM STDIN`` on
PostgreSQL (straight into the table: the DELETE has already made room, and
only the claim holder writes a bucket), ``executemany`` on SQLite.
"""

from __future__ import annotations

import struct
from collections.abc import Sequence
from datetime import UTC, datetime, timedelta
from typing import cast

from sqlalchemy import Connection, Table, and_, delete, insert, or_, select, tuple_

from calibrant.store.dirty import DayKey, Key
from calibrant.store.rollup_tables import BucketSummary, DaySummary, DirtyBucket

Encoded = dict[tuple[str, str], tuple[int, bytes]]  # per segment: (rows summarised, Summary bytes)
_PG_EPOCH = datetime(2000, 1, 1, tzinfo=UTC)  # PostgreSQL's binary timestamps count µs from here
_INT4 = struct.Struct(">ii")  # field length 4, value
_TIME = struct.Struct(">iq")  # field length 8, µs since _PG_EPOCH
_BATCH = 5000  # keys per DELETE statement


def replace_many(conn: Connection, items: Sequence[tuple[Key, Encoded]], now: datetime) -> int:
    """Make the stored summaries of each key exactly its ``Encoded`` (vanished segments go).

    All keys of one tier (all BucketKey or all DayKey). Returns the number of rows written.
    """
    if not items:
        return 0
    daily = isinstance(items[0][0], DayKey)
    table = cast(Table, DaySummary.__table__ if daily else BucketSummary.__table__)
    column = "day" if daily else "hour"
    keys = sorted({k for k, _ in items})
    for i in range(0, len(keys), _BATCH):
        part = keys[i:i + _BATCH]
        if conn.dialect.name == "postgresql":  # a hash join with the keys, not a list of OR terms
            conn.exec_driver_sql(
                f"DELETE FROM {table.name} s USING unnest(%(models)s::int[], %(versions)s::text[], "  # noqa: S608 — names are constants
                f"%(times)s::timestamptz[]) AS k(m, v, t) "
                f"WHERE s.model_id = k.m AND s.version = k.v AND s.{column} = k.t",
                {"models": [k.model_id for k in part], "versions": [k.version for k in part],
                 "times": [k.start for k in part]})
        else:
            conn.execute(delete(table).where(
                tuple_(table.c.model_id, table.c.version, table.c[column]).in_(
                    [(k.model_id, k.version, k.start) for k in part])))
    rows = [(k.model_id, k.version, seg_key, seg_value, k.start, n, payload, now)
            for k, encoded in sorted(items, key=lambda item: item[0])
            for (seg_key, seg_value), (n, payload) in sorted(encoded.items())]
    if not rows:
        return 0
    if conn.dialect.name == "postgresql":
        raw = conn.connection.driver_connection
        assert raw is not None
        columns = f"model_id, version, segment_key, segment_value, {column}, n, payload, computed_at"
        statement = f"COPY {table.name} ({columns}) FROM STDIN (FORMAT BINARY)"
        with raw.cursor() as cur, cur.copy(statement) as copy:
            for i in range(0, len(rows), 1000):
                copy.write(_binary_copy(rows[i:i + 1000], header=i == 0, trailer=i + 1000 >= len(rows)))
    else:
        names = ("model_id", "version", "segment_key", "segment_value", column, "n", "payload", "computed_at")
        conn.execute(insert(table), [dict(zip(names, row, strict=True)) for row in rows])
    return len(rows)


def _binary_copy(rows: list[tuple], *, header: bool, trailer: bool) -> bytes:
    """Rows (model_id, version, segment key, segment value, start, n, payload, computed_at) in
    PostgreSQL's binary COPY format, built here: psycopg's write_row cost 20 µs a row."""
    out = [b"PGCOPY\n\xff\r\n\x00" + bytes(8)] if header else []
    computed = None
    for model_id, version, seg_key, seg_value, start, n, payload, now in rows:
        if computed is None:
            computed = _TIME.pack(8, _micros(now))
        v, k, s = version.encode(), seg_key.encode(), seg_value.encode()
        out += [b"\x00\x08", _INT4.pack(4, model_id),
                len(v).to_bytes(4, "big"), v, len(k).to_bytes(4, "big"), k, len(s).to_bytes(4, "big"), s,
                _TIME.pack(8, _micros(start)), _INT4.pack(4, n),
                len(payload).to_bytes(4, "big"), payload, computed]
    if trailer:
        out.append(b"\xff\xff")
    return b"".join(out)


def _micros(instant: datetime) -> int:
    delta = instant - _PG_EPOCH
    return (delta.days * 86_400 + delta.seconds) * 1_000_000 + delta.microseconds


def hours_of_days(conn: Connection, days: Sequence[DayKey]) -> list[tuple[DayKey, str, str, bytes]]:
    """Every stored hourly summary of the given days (one model): (day, key, value, payload)."""
    if not days:
        return []
    t = BucketSummary.__table__
    spans = _day_spans(days)
    model_id = days[0].model_id
    where = or_(*(and_(t.c.version == v, t.c.hour >= lo, t.c.hour < hi) for v, lo, hi in spans))
    rows = conn.execute(
        select(t.c.version, t.c.hour, t.c.segment_key, t.c.segment_value, t.c.payload)
        .where(t.c.model_id == model_id, where)
    )
    wanted = {(d.version, d.day) for d in days}
    out = []
    for version, hour, seg_key, seg_value, payload in rows:
        day = hour.replace(hour=0, minute=0, second=0, microsecond=0)
        if (version, day) in wanted:
            out.append((DayKey(model_id, version, day), seg_key, seg_value, bytes(payload)))
    return out


def days_with_dirty_hours(conn: Connection, days: Sequence[DayKey]) -> set[DayKey]:
    """Those of ``days`` that still have a dirty hour (they are merged after it is stored)."""
    if not days:
        return set()
    t = DirtyBucket.__table__
    out: set[DayKey] = set()
    by_model: dict[int, list[DayKey]] = {}
    for d in days:
        by_model.setdefault(d.model_id, []).append(d)
    for model_id, mine in by_model.items():
        spans = _day_spans(mine)
        where = or_(*(and_(t.c.version == v, t.c.hour >= lo, t.c.hour < hi) for v, lo, hi in spans))
        wanted = {(d.version, d.day) for d in mine}
        found = conn.execute(select(t.c.version, t.c.hour).where(t.c.model_id == model_id, where))
        for version, hour in found:
            day = hour.replace(hour=0, minute=0, second=0, microsecond=0)
            if (version, day) in wanted:
                out.add(DayKey(model_id, version, day))
    return out


def _day_spans(days: Sequence[DayKey]) -> list[tuple[str, datetime, datetime]]:
    """Runs of consecutive days per version: (version, first day, day after the last)."""
    spans: list[tuple[str, datetime, datetime]] = []
    one = timedelta(days=1)
    for d in sorted(days, key=lambda k: (k.version, k.day)):
        if spans and spans[-1][0] == d.version and spans[-1][2] == d.day:
            spans[-1] = (d.version, spans[-1][1], d.day + one)
        else:
            spans.append((d.version, d.day, d.day + one))
    return spans
