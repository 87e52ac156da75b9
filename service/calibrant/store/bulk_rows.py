"""The joined rows of many hourly buckets in one query, straight into numpy arrays.

A set-based refresh reads a range of buckets (runs of consecutive hours of one
model's versions) at once instead of bucket by bucket. Each row comes back as
fixed-width numbers: the version's index, the hour (hours since 1970-01-01
UTC, computed by the database so no timestamp is parsed here), the
probability, the counted label (−1 when there is no outcome yet; the rule of
``store.event_label``) and the index of its tag string in a list of the
range's distinct tag strings, so each distinct string reaches Python once.

PostgreSQL: binary ``COPY (SELECT ...) TO STDOUT``, every column fixed-width,
parsed by one ``np.frombuffer`` with a structured big-endian dtype. The tag
strings are first read with ``SELECT DISTINCT`` and numbered by a hash join
with ``unnest(...) WITH ORDINALITY``; both statements run in one REPEATABLE
READ transaction, so they see the same rows. SQLite: one query, the tag
strings numbered in Python.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy import Connection, Engine

from calibrant.store.event_label import counted_label

_PG_HEADER = b"PGCOPY\n\xff\r\n\x00"
_PG_ROW = np.dtype([
    ("n", ">i2"),
    ("l_version", ">i4"), ("version", ">i2"),
    ("l_hour", ">i4"), ("hour", ">i4"),
    ("l_p", ">i4"), ("p", ">f8"),
    ("l_label", ">i4"), ("label", ">i2"),
    ("l_tag", ">i4"), ("tag", ">i4"),
])
_PG_LENGTHS = {"l_version": 2, "l_hour": 4, "l_p": 8, "l_label": 2, "l_tag": 4}
# hours since the epoch, exact: the epoch of a whole UTC hour is a whole multiple of 3600
_PG_HOUR = "(date_part('epoch', date_trunc('hour', predictions.scored_at AT TIME ZONE 'UTC')) / 3600)::int4"
_SQLITE_TIME = "%Y-%m-%d %H:%M:%S.%f"  # how SQLAlchemy stores a DATETIME on SQLite (naive UTC)
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


@dataclass(frozen=True, slots=True)
class Span:
    """Consecutive hours [start, end) of one version."""

    version: str
    start: datetime
    end: datetime


@dataclass(frozen=True, slots=True)
class RangeRows:
    versions: list[str]  # version_code indexes this list
    version_code: np.ndarray  # int16
    hour: np.ndarray  # int64, hours since the epoch (UTC)
    probability: np.ndarray  # float64
    label: np.ndarray  # int8: 1, 0, or −1 when no outcome yet
    tag_code: np.ndarray  # int64, index into tag_texts
    tag_texts: list[str]  # distinct tag strings ("" for none); [""] when tags were not asked for

    @property
    def size(self) -> int:
        return int(self.probability.size)

    @classmethod
    def from_parsed(cls, rows: np.ndarray, versions: list[str], tag_texts: list[str]) -> RangeRows:
        """From the structured array of a parsed binary COPY (``_parse_rows``)."""
        return cls(
            versions=versions,
            version_code=rows["version"].astype(np.int16),
            hour=rows["hour"].astype(np.int64),
            probability=rows["p"].astype(np.float64),
            label=rows["label"].astype(np.int8),
            tag_code=rows["tag"].astype(np.int64),
            tag_texts=tag_texts,
        )


def hours_since_epoch(instant: datetime) -> int:
    return int((instant - _EPOCH).total_seconds()) // 3600


def range_rows(engine: Engine, model_id: int, spans: list[Span], horizon_days: int | None,
               with_tags: bool, known_tags: list[str] | None = None) -> RangeRows:
    """Every prediction scored in one of ``spans`` of the model, joined with its outcome.

    ``known_tags``: the tag strings of the previous chunk. On PostgreSQL the rows are first
    numbered against them, and the range's own distinct strings are read only when a row
    carries one they lack (most chunks of a model share their tags).
    """
    versions = sorted({s.version for s in spans})
    if engine.dialect.name == "postgresql":
        return _postgres(engine, model_id, spans, versions, horizon_days, with_tags, known_tags)
    return _sqlite(engine, model_id, spans, versions, horizon_days, with_tags)


def _label_sql(conn: Connection, horizon_days: int | None) -> str:
    expr = counted_label(conn, horizon_days)
    return str(expr.compile(dialect=conn.dialect, compile_kwargs={"literal_binds": True}))


_JOIN_OUTCOMES = ("LEFT OUTER JOIN outcomes ON outcomes.model_id = predictions.model_id "
                  "AND outcomes.case_id = predictions.case_id")


def _postgres(engine: Engine, model_id: int, spans: list[Span], versions: list[str],
              horizon_days: int | None, with_tags: bool, known_tags: list[str] | None) -> RangeRows:
    params: dict[str, Any] = {
        "model_id": model_id,
        "versions": [s.version for s in spans],
        "codes": [versions.index(s.version) for s in spans],
        "starts": [s.start for s in spans],
        "ends": [s.end for s in spans],
    }
    # LATERAL with OFFSET 0 (which keeps the planner from flattening it): each span is an index
    # range scan on (model_id, version, scored_at). Flattened, the planner merge-joined every row
    # of the model with every span of its version (6M pairs filtered for 3k rows, measured).
    in_spans = (
        "FROM unnest(%(versions)s::text[], %(codes)s::int2[], %(starts)s::timestamptz[], "
        "%(ends)s::timestamptz[]) AS span(version, code, lo, hi) "
        "CROSS JOIN LATERAL (SELECT * FROM predictions WHERE predictions.model_id = %(model_id)s "
        "AND predictions.version = span.version AND predictions.scored_at >= span.lo "
        "AND predictions.scored_at < span.hi OFFSET 0) AS predictions"
    )
    with engine.connect().execution_options(isolation_level="REPEATABLE READ") as conn:
        conn.exec_driver_sql("SELECT 1")  # begin the transaction at its isolation level
        label = _label_sql(conn, horizon_days)
        raw = conn.connection.driver_connection
        assert raw is not None
        tag_texts = list(known_tags or []) if with_tags else [""]
        data = b""
        for attempt in range(2):
            if with_tags and (attempt or not tag_texts):
                tag_texts = [t for (t,) in conn.exec_driver_sql(
                    f"SELECT DISTINCT coalesce(predictions.tags, '') {in_spans}", params)]
            params["tags"] = tag_texts
            # a row whose tag string is not in the list gets −1 (LEFT JOIN), and the list is read
            tag_column = "coalesce(tag.code - 1, -1)::int4" if with_tags else "0::int4"
            tag_join = ("LEFT JOIN unnest(%(tags)s::text[]) WITH ORDINALITY AS tag(text, code) "
                        "ON tag.text = coalesce(predictions.tags, '')") if with_tags else ""
            query = (f"SELECT span.code, {_PG_HOUR}, predictions.probability, coalesce({label}, -1)::int2, "
                     f"{tag_column} {in_spans} {_JOIN_OUTCOMES} {tag_join}")
            with raw.cursor() as cur, cur.copy(f"COPY ({query}) TO STDOUT (FORMAT BINARY)", params) as copy:
                data = b"".join([bytes(block) for block in copy])
            if not with_tags or not np.any(_parse_binary_copy(data)["tag"] == -1):
                break
        conn.rollback()
    return RangeRows.from_parsed(_parse_binary_copy(data), versions, tag_texts)


def _parse_binary_copy(data: bytes) -> np.ndarray:
    """PostgreSQL's binary COPY format (header, fixed-width tuples, trailer −1) as a record array."""
    if not data.startswith(_PG_HEADER):
        raise ValueError("not a PostgreSQL binary COPY stream")
    extension = int.from_bytes(data[15:19], "big")
    if data[-2:] != b"\xff\xff":
        raise ValueError("binary COPY stream has no trailer")
    return _parse_rows(data[19 + extension:-2])


def _parse_rows(body: bytes) -> np.ndarray:
    """Whole fixed-width tuples of a binary COPY stream as a record array (checked)."""
    if len(body) % _PG_ROW.itemsize:
        raise ValueError("binary COPY stream has an unexpected row layout")
    rows = np.frombuffer(body, dtype=_PG_ROW)
    unexpected = any(np.any(rows[k] != n) for k, n in _PG_LENGTHS.items())
    if rows.size and (np.any(rows["n"] != 5) or unexpected):
        raise ValueError("binary COPY stream has an unexpected column layout")
    return rows


def _sqlite(engine: Engine, model_id: int, spans: list[Span], versions: list[str],
            horizon_days: int | None, with_tags: bool) -> RangeRows:
    params: list[Any] = []
    for s in spans:
        params += [s.version, _sqlite_time(s.start), _sqlite_time(s.end)]
    params += versions
    params.append(model_id)
    version_case = " ".join(f"WHEN ? THEN {i}" for i in range(len(versions)))
    with engine.connect() as conn:
        # CROSS JOIN makes SQLite loop over the spans outside, each an index range scan on
        # (model_id, version, scored_at); an OR of the spans would exceed its expression depth.
        query = (
            f"WITH span(version, lo, hi) AS (VALUES {', '.join(['(?, ?, ?)'] * len(spans))}) "  # noqa: S608
            f"SELECT CASE predictions.version {version_case} END, "
            f"CAST(strftime('%s', predictions.scored_at) AS INTEGER) / 3600, predictions.probability, "
            f"coalesce({_label_sql(conn, horizon_days)}, -1), "
            f"{'predictions.tags' if with_tags else 'NULL'} "
            f"FROM span CROSS JOIN predictions {_JOIN_OUTCOMES} "
            f"WHERE predictions.model_id = ? AND predictions.version = span.version "
            f"AND predictions.scored_at >= span.lo AND predictions.scored_at < span.hi"
        )
        # Straight on the driver's connection, outside any BEGIN: the engine opens every
        # transaction with BEGIN IMMEDIATE (the write lock); a lone SELECT in autocommit mode
        # reads a WAL snapshot and leaves ingest and other writers free meanwhile.
        raw = conn.connection.driver_connection
        assert raw is not None
        cursor = raw.execute(query, tuple(params))
        try:
            rows = cursor.fetchall()
        finally:
            cursor.close()
    codes: dict[str, int] = {}
    if rows:
        v, h, p, y, t = zip(*rows, strict=True)
        tag_code = np.fromiter((codes.setdefault(x or "", len(codes)) for x in t), np.int64, len(t))
    else:
        v = h = p = y = ()
        tag_code = np.empty(0, np.int64)
    return RangeRows(
        versions=versions,
        version_code=np.asarray(v, dtype=np.int16),
        hour=np.asarray(h, dtype=np.int64),
        probability=np.asarray(p, dtype=np.float64),
        label=np.asarray(y, dtype=np.int8),
        tag_code=tag_code,
        tag_texts=list(codes) or [""],
    )


def _sqlite_time(instant: datetime) -> str:
    return instant.astimezone(UTC).replace(tzinfo=None).strftime(_SQLITE_TIME)
