"""Raw rows as the service knew them at an instant ``as_of``: what a reproducible report reads.

A prediction is known if it was received at or before ``as_of``; a case's label is the
latest of its outcome revisions received at or before ``as_of`` (``outcome_revisions`` keeps
every label a case has had). Rows come in primary-key order so that sums over them are
added in the same order whenever the report is rebuilt: floating-point addition is not
associative, and "the same numbers later" means the same bits.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
from psycopg import ClientCursor, pq
from sqlalchemy import JSON, BigInteger, SmallInteger, and_, case, cast, func, select
from sqlalchemy.engine import Connection
from sqlalchemy.sql.elements import ColumnElement

from calibrant.store.rollup_tables import MAX_SEGMENT_VALUES, OTHER_VALUE
from calibrant.store.tables import Outcome, OutcomeRevision, Prediction

# Binary COPY framing (PostgreSQL protocol docs, "COPY … BINARY file format").
_COPY_SIGNATURE = b"PGCOPY\n\xff\r\n\x00"
_COPY_HEADER = 11 + 4 + 4  # signature, flags, header-extension length (then the extension)


@dataclass(frozen=True, slots=True)
class SegmentCodes:
    """One declared tag key: a code per row (-1: the row lacks the tag), into ``values``."""

    key: str
    codes: np.ndarray  # int16
    values: list[str]  # the kept values, then OTHER_VALUE when some were pooled


@dataclass(frozen=True, slots=True)
class KnownRows:
    """Column arrays of the known predictions of a span: one entry per (case, version)."""

    probability: np.ndarray  # float64
    label: np.ndarray  # int8: 1, 0, or -1 when no label was known
    scored_epoch: np.ndarray  # int64 seconds since 1970-01-01 UTC (whole seconds)
    version_code: np.ndarray  # int16, into ``versions``
    versions: list[str]
    segments: list[SegmentCodes]

    @property
    def size(self) -> int:
        return int(self.probability.size)


def _epoch_seconds(conn: Connection, column: Any) -> ColumnElement[int]:
    if conn.dialect.name == "postgresql":
        return cast(func.floor(func.extract("epoch", column)), BigInteger)
    return cast(func.strftime("%s", column), BigInteger)


def _tag_value(conn: Connection, key: str) -> ColumnElement[str]:
    if conn.dialect.name == "postgresql":
        return func.json_extract_path_text(cast(Prediction.tags, JSON), key)
    return func.json_extract(Prediction.tags, f'$."{key}"')


def revisions_after(conn: Connection, model_id: int, as_of: datetime) -> bool:
    """Whether any outcome revision of the model was received after ``as_of``."""
    return conn.execute(
        select(OutcomeRevision.id)
        .where(OutcomeRevision.model_id == model_id, OutcomeRevision.received_at > as_of)
        .limit(1)
    ).first() is not None


def known_rows(conn: Connection, model_id: int, start: datetime, end: datetime, as_of: datetime,
               *, version: str | None = None, segment_keys: Sequence[str] = (),
               labels_settled: bool = False) -> KnownRows:
    """Predictions scored in [start, end) and received by ``as_of``, with their labels as of then.

    When no revision arrived after ``as_of`` the current label is the label as of then, and
    the join reads ``outcomes`` directly (the common case: a report of the present, for which
    the caller passes ``labels_settled`` and the check is skipped). Versions
    and segment values travel as small integer codes, so that every column is a fixed-width
    number: PostgreSQL sends them by binary COPY, read with one ``numpy.frombuffer``.
    Each key keeps its MAX_SEGMENT_VALUES most frequent values (ties by name); the rest are
    pooled under ``other``, as the stored segments pool them.
    """
    known = [Prediction.model_id == model_id, Prediction.scored_at >= start, Prediction.scored_at < end,
             Prediction.received_at <= as_of]
    if version is not None:
        known.append(Prediction.version == version)
    versions = list(conn.execute(select(Prediction.version).where(*known).distinct()
                                 .order_by(Prediction.version)).scalars())
    segments = [_segment_values(conn, key, known) for key in segment_keys]
    if not labels_settled and revisions_after(conn, model_id, as_of):
        # Each case's latest revision received by as_of: one grouped pass, then one join
        # (a correlated max per prediction costs an index probe per row).
        latest = (
            select(OutcomeRevision.case_id, func.max(OutcomeRevision.revision).label("revision"))
            .where(OutcomeRevision.model_id == model_id, OutcomeRevision.received_at <= as_of)
            .group_by(OutcomeRevision.case_id)
            .subquery()
        )
        labels = (
            select(OutcomeRevision.case_id, OutcomeRevision.label)
            .join(latest, and_(latest.c.case_id == OutcomeRevision.case_id,
                               latest.c.revision == OutcomeRevision.revision))
            .where(OutcomeRevision.model_id == model_id)
            .subquery()
        )
        label_source: Any = labels
        join_on = labels.c.case_id == Prediction.case_id
        label_column: Any = labels.c.label
    else:
        label_source = Outcome
        join_on = and_(Outcome.model_id == Prediction.model_id, Outcome.case_id == Prediction.case_id)
        label_column = Outcome.label
    columns: list[Any] = [
        Prediction.probability,
        cast(func.coalesce(label_column, -1), SmallInteger),
        _epoch_seconds(conn, Prediction.scored_at),
        cast(_coded(Prediction.version, versions, missing=-1, pooled=-1), SmallInteger),
    ]
    for key, kept, pooled in segments:
        coded = _coded(_tag_value(conn, key), kept, missing=-1, pooled=len(kept) if pooled else -1)
        columns.append(cast(coded, SmallInteger))
    query = (
        select(*columns)
        .select_from(Prediction)
        .outerjoin(label_source, join_on)
        .where(*known)
        .order_by(Prediction.case_id, Prediction.version)
    )
    table = _fetch_pg(conn, query, 3 + len(segments)) if conn.dialect.name == "postgresql" else \
        _fetch_rows(conn, query, 3 + len(segments))
    return KnownRows(
        table[0].astype(np.float64), table[1].astype(np.int8), table[2].astype(np.int64),
        table[3].astype(np.int16), versions,
        [SegmentCodes(key, codes.astype(np.int16), [*kept, *([OTHER_VALUE] if pooled else [])])
         for (key, kept, pooled), codes in zip(segments, table[4:], strict=True)],
    )


def _segment_values(conn: Connection, key: str, known: list[Any]) -> tuple[str, list[str], bool]:
    """The key's kept values (most frequent first, ties by name) and whether others were pooled."""
    value = _tag_value(conn, key)
    counts = conn.execute(
        select(value, func.count()).select_from(Prediction).where(*known).group_by(value)).all()
    # Rows without the tag group under NULL, dropped here: filtering in SQL would parse each tag twice.
    ranked = sorted(((str(v), int(n)) for v, n in counts if v is not None), key=lambda vn: (-vn[1], vn[0]))
    kept = sorted(v for v, _ in ranked[:MAX_SEGMENT_VALUES])
    return key, kept, len(ranked) > MAX_SEGMENT_VALUES


def _coded(column: Any, values: list[str], *, missing: int, pooled: int) -> Any:
    """``column`` as the index of its value in ``values``; ``pooled`` for another value,
    ``missing`` for NULL."""
    if not values:
        return case((column.is_(None), missing), else_=pooled)
    return case({v: i for i, v in enumerate(values)}, value=column,
                else_=case((column.is_(None), missing), else_=pooled))


def _fetch_rows(conn: Connection, query: Any, n_ints: int) -> list[np.ndarray]:
    rows = conn.execute(query).all()
    if not rows:
        return [np.empty(0)] * (1 + n_ints)
    floats = np.fromiter((r[0] for r in rows), dtype=np.float64, count=len(rows))
    ints = np.array([r[1:] for r in rows], dtype=np.int64).reshape(len(rows), n_ints)
    return [floats, *(ints[:, i] for i in range(n_ints))]


def _fetch_pg(conn: Connection, query: Any, n_ints: int) -> list[np.ndarray]:
    """Binary COPY of (float8, int2, int8, int2…) rows, parsed in one pass by a record dtype.

    Measured on 1M rows (tests/bench/report.py's data): this reads in about half the time
    of folding each week's rows into one ``array_agg`` of records, whose sorts and record
    building cost the server more than the million small messages cost here.
    """
    compiled = query.compile(dialect=conn.dialect)
    raw = conn.connection.driver_connection
    assert raw is not None
    # The key-order sort of a year's rows spills to disk at the default 4 MB; for this
    # transaction only, give it room (about 60 MB per million rows).
    conn.exec_driver_sql("SET LOCAL work_mem = '128MB'")
    # COPY takes no server-side parameters: bind them client-side, as psycopg's Copy does.
    statement = ClientCursor(raw).mogrify(f"COPY ({compiled.string}) TO STDOUT (FORMAT BINARY)",
                                          compiled.params)
    data = _copy_out(raw.pgconn, statement.encode())
    if not data.startswith(_COPY_SIGNATURE):
        raise RuntimeError("unexpected COPY BINARY header")
    extension = int.from_bytes(data[15:19], "big")
    body = memoryview(data)[_COPY_HEADER + extension:-2]  # the trailer is int16 -1
    fields = [("count", ">i2"), ("l0", ">i4"), ("p", ">f8"), ("l1", ">i4"), ("y", ">i2"),
              ("l2", ">i4"), ("t", ">i8")]
    fields += [item for i in range(n_ints - 2) for item in ((f"l{i + 3}", ">i4"), (f"c{i}", ">i2"))]
    records = np.frombuffer(body, dtype=np.dtype(fields))
    if records.size and np.any(records["count"] != 1 + n_ints):
        raise RuntimeError("unexpected COPY BINARY row shape")
    return [records["p"], records["y"], records["t"], *(records[f"c{i}"] for i in range(n_ints - 2))]


def _copy_out(pgconn: Any, statement: bytes) -> bytes:
    """Every byte a ``COPY … TO STDOUT`` sends, read with libpq's own loop.

    COPY sends one message per row; reading them through libpq's blocking ``PQgetCopyData``
    (psycopg's ``pq`` binding) took about three quarters of the time of iterating psycopg's
    ``Copy`` object on 300,000 rows (2.9 s against 3.9 s, load average 11). Whatever happens,
    the connection is read back to idle so that the caller's transaction can still end.
    """
    pgconn.send_query(statement)
    chunks: list[bytes] = []
    copying = finished = False
    problem: str | None = None
    try:
        result = pgconn.get_result()
        copying = result is not None and result.status == pq.ExecStatus.COPY_OUT
        if not copying:
            problem = "COPY did not start: " + _message(result)
        while copying:
            size, chunk = pgconn.get_copy_data(0)
            if size < 0:
                break
            chunks.append(chunk)
        finished = True
    finally:
        if copying and not finished:
            while pgconn.get_copy_data(0)[0] >= 0:
                pass
        while (result := pgconn.get_result()) is not None:
            if result.status != pq.ExecStatus.COMMAND_OK and problem is None:
                problem = "COPY failed: " + _message(result)
    if problem is not None:
        raise RuntimeError(problem)
    return b"".join(chunks)


def _message(result: Any) -> str:
    return "" if result is None else bytes(result.error_message or b"").decode(errors="replace")


@dataclass(frozen=True, slots=True)
class ArrivedLater:
    """Data for a span that reached the service after ``as_of``."""

    predictions: int  # predictions scored in the span, received after as_of
    first_labels: int  # cases of the span whose first label arrived after as_of
    corrections: int  # label revisions after the first, received after as_of


def arrived_after(conn: Connection, model_id: int, start: datetime, end: datetime,
                  as_of: datetime) -> ArrivedLater:
    late_predictions = conn.execute(
        select(func.count()).select_from(Prediction).where(
            Prediction.model_id == model_id, Prediction.scored_at >= start, Prediction.scored_at < end,
            Prediction.received_at > as_of)
    ).scalar_one()
    in_span = (
        select(Prediction.case_id)
        .where(Prediction.model_id == OutcomeRevision.model_id, Prediction.case_id == OutcomeRevision.case_id,
               Prediction.scored_at >= start, Prediction.scored_at < end)
        .correlate(OutcomeRevision)
        .exists()
    )
    first, total = conn.execute(
        select(func.coalesce(func.sum(case((OutcomeRevision.revision == 1, 1), else_=0)), 0), func.count())
        .where(OutcomeRevision.model_id == model_id, OutcomeRevision.received_at > as_of, in_span)
    ).one()
    return ArrivedLater(int(late_predictions), int(first), int(total) - int(first))
