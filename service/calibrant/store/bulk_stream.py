"""A long run of hours read in one ordered binary COPY, handed out in chunks of whole buckets.

For a large claim (a full refresh: few spans, most of a model's rows) reading chunk by chunk
costs one index range scan per chunk, a random heap read per row and an outcome lookup per
row: at 10M rows the server's side of the reads was most of the refresh. Here the database
plans the whole range once (sequential scans and a hash join when it covers most of the
table), sorts the narrow projected rows by (hour, version), and the client parses the stream
into chunks of about ``chunk_rows`` rows, cut between buckets, so memory stays bounded.

The distinct tag strings are read first in the same REPEATABLE READ transaction (``bulk_rows``).
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import numpy as np
from sqlalchemy import Engine

from calibrant.store.bulk_rows import (
    _JOIN_OUTCOMES,
    _PG_HEADER,
    _PG_HOUR,
    _PG_ROW,
    RangeRows,
    Span,
    _label_sql,
    _parse_rows,
)


def stream_range_rows(engine: Engine, model_id: int, spans: list[Span], horizon_days: int | None,
                      with_tags: bool, chunk_rows: int) -> Iterator[RangeRows]:
    """Every prediction scored in ``spans`` (PostgreSQL), in (hour, version) order, whole buckets
    per chunk."""
    versions = sorted({s.version for s in spans})
    params: dict[str, Any] = {"model_id": model_id}
    terms = []
    for i, s in enumerate(spans):
        params.update({f"v{i}": s.version, f"lo{i}": s.start, f"hi{i}": s.end})
        terms.append(f"(predictions.version = %(v{i})s AND predictions.scored_at >= %(lo{i})s "
                     f"AND predictions.scored_at < %(hi{i})s)")
    code = " ".join(f"WHEN %(c{i})s THEN {i}" for i in range(len(versions)))
    params.update({f"c{i}": v for i, v in enumerate(versions)})
    where = f"WHERE predictions.model_id = %(model_id)s AND ({' OR '.join(terms)})"
    with engine.connect().execution_options(isolation_level="REPEATABLE READ") as conn:
        # Begins the transaction at its isolation level. The sort of a long range runs on disk in
        # the default 4 MB; 64 MB for this transaction's sort cuts its merge passes.
        conn.exec_driver_sql("SET LOCAL work_mem = '64MB'")
        label = _label_sql(conn, horizon_days)
        tag_texts = [""]
        tag_column, tag_join = "0::int4", ""
        if with_tags:
            tag_texts = [t for (t,) in conn.exec_driver_sql(
                f"SELECT DISTINCT coalesce(predictions.tags, '') FROM predictions {where}", params)]  # noqa: S608 — generated placeholders
            params["tags"] = tag_texts
            tag_column = "(tag.code - 1)::int4"
            tag_join = ("JOIN unnest(%(tags)s::text[]) WITH ORDINALITY AS tag(text, code) "
                        "ON tag.text = coalesce(predictions.tags, '')")
        query = (f"SELECT (CASE predictions.version {code} END)::int2 AS version_code, {_PG_HOUR} AS hour, "  # noqa: S608 — generated placeholders
                 f"predictions.probability, coalesce({label}, -1)::int2, {tag_column} "
                 f"FROM predictions {_JOIN_OUTCOMES} {tag_join} {where} ORDER BY hour, version_code")
        raw = conn.connection.driver_connection
        assert raw is not None
        size = _PG_ROW.itemsize
        pending = bytearray()
        header = True
        with raw.cursor() as cur, cur.copy(f"COPY ({query}) TO STDOUT (FORMAT BINARY)", params) as copy:
            for block in copy:
                pending += block
                if header and len(pending) >= 19:
                    if not pending.startswith(_PG_HEADER):
                        raise ValueError("not a PostgreSQL binary COPY stream")
                    del pending[:19 + int.from_bytes(pending[15:19], "big")]
                    header = False
                if len(pending) >= chunk_rows * size:
                    rows = _parse_rows(bytes(pending[:len(pending) // size * size]))
                    keep = _last_bucket_start(rows)
                    if keep == 0:  # one bucket larger than a chunk: wait for its end
                        continue
                    del pending[:keep * size]
                    yield RangeRows.from_parsed(rows[:keep], versions, tag_texts)
        if pending[-2:] != b"\xff\xff":
            raise ValueError("binary COPY stream has no trailer")
        rows = _parse_rows(bytes(pending[:-2]))
        conn.rollback()
    if rows.size:
        yield RangeRows.from_parsed(rows, versions, tag_texts)


def _last_bucket_start(rows: np.ndarray) -> int:
    """Index of the first row of the last (hour, version) in ``rows`` (rows are in that order)."""
    last = (rows["hour"][-1], rows["version"][-1])
    same = (rows["hour"] == last[0]) & (rows["version"] == last[1])
    return int(np.argmax(same))
