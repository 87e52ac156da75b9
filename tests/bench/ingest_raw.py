"""The database's own bulk insert of the benchmark rows: the ceiling HTTP ingest is compared with.

PostgreSQL: binary ``COPY`` into a copy of ``predictions`` (same columns,
primary key, indexes and collation, via ``LIKE … INCLUDING ALL``) in a
scratch schema. SQLite: one-transaction ``executemany`` into ``predictions``
of a second database file built by the same migrations and opened with the
same PRAGMAs as the service's.
"""

from __future__ import annotations

import time
import uuid
from datetime import UTC, datetime
from pathlib import Path

import sqlalchemy as sa
from tests.bench.ingest_rows import BenchRows, Checksum, checksum

from calibrant.config import Settings
from calibrant.store import migrate
from calibrant.store.bulk import sqlite_instant
from calibrant.store.engine import make_engine

MODEL_ID = 1
COPY_TYPES = ["int4", "text", "text", "float8", "timestamptz", "text", "timestamptz"]


def raw_postgresql(database_url: str, rows: BenchRows) -> tuple[float, Checksum]:
    """Seconds for COPY + commit of ``rows``, and what the copy table then holds."""
    engine = sa.create_engine(database_url)
    scratch = f"calibrant_bench_raw_{uuid.uuid4().hex[:8]}"
    tags = rows.canonical_tags()
    received = datetime.now(UTC)
    records = [
        (MODEL_ID, case_id, version, probability, scored_at, tag, received)
        for case_id, version, probability, scored_at, tag in zip(
            rows.case_id, rows.version, rows.probability, rows.scored_at, tags, strict=True
        )
    ]
    try:
        with engine.begin() as conn:
            conn.exec_driver_sql(f'CREATE SCHEMA "{scratch}"')
            # search_path of the URL points at the migrated schema, so LIKE finds its table.
            conn.exec_driver_sql(f'CREATE TABLE "{scratch}".predictions (LIKE predictions INCLUDING ALL)')
        with engine.connect() as conn:
            raw = conn.connection.driver_connection
            start = time.perf_counter()
            with raw.cursor() as cur, cur.copy(
                f'COPY "{scratch}".predictions (model_id, case_id, version, probability, '
                "scored_at, tags, received_at) FROM STDIN (FORMAT BINARY)"
            ) as copy:
                copy.set_types(COPY_TYPES)
                for record in records:
                    copy.write_row(record)
            raw.commit()
            seconds = time.perf_counter() - start
            return seconds, checksum(conn, f'"{scratch}".predictions')
    finally:
        with engine.begin() as conn:
            conn.exec_driver_sql(f'DROP SCHEMA IF EXISTS "{scratch}" CASCADE')
        engine.dispose()


def raw_sqlite(scratch_path: Path, rows: BenchRows) -> tuple[float, Checksum]:
    """Seconds for one BEGIN … executemany … COMMIT of ``rows`` into a fresh migrated file."""
    scratch_path.unlink(missing_ok=True)
    engine = make_engine(Settings(database_url=f"sqlite:///{scratch_path}"))
    migrate.upgrade(engine)
    tags = rows.canonical_tags()
    received = sqlite_instant(datetime.now(UTC))
    records = [
        (
            MODEL_ID,
            rows.case_id[i],
            rows.version[i],
            rows.probability[i],
            sqlite_instant(rows.scored_at[i]),
            tags[i],
            received,
        )
        for i in range(len(rows))
    ]
    try:
        with engine.connect() as conn:
            raw = conn.connection.driver_connection  # autocommit driver: we issue BEGIN ourselves
            start = time.perf_counter()
            raw.execute("BEGIN IMMEDIATE")
            raw.executemany(
                "INSERT INTO predictions (model_id, case_id, version, probability, scored_at, tags, "
                "received_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
                records,
            )
            raw.execute("COMMIT")
            seconds = time.perf_counter() - start
            return seconds, checksum(conn, "predictions")
    finally:
        engine.dispose()
