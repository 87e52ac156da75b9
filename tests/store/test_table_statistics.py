"""The service analyzes a table after a large share of it changed, at most once per interval."""

from __future__ import annotations

import time
from datetime import UTC, datetime, timedelta

import pytest
import sqlalchemy as sa

from calibrant.store import table_statistics
from tests.conftest import Database

NOW = datetime(2026, 5, 4, tzinfo=UTC)


def changed_since_analyze(db: Database, table: str) -> int:
    with db.engine.connect() as conn:
        return int(conn.execute(sa.text(
            "SELECT coalesce(max(n_mod_since_analyze), 0) FROM pg_stat_user_tables "
            "WHERE schemaname = current_schema() AND relname = :t"), {"t": table}).scalar() or 0)


def test_a_bulk_load_is_analyzed_once_then_not_again_within_the_interval(
    db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(table_statistics, "_last", {})  # other tests' refreshes share this process
    if db.dialect == "sqlite":
        assert table_statistics.analyze_if_stale(db.engine, NOW) == []  # nothing to keep fresh
        return
    with db.engine.begin() as conn:
        conn.execute(sa.text(
            "INSERT INTO predictions (model_id, case_id, version, probability, scored_at, tags, received_at) "
            "SELECT 7, 'c' || g, 'v1', 0.5, :t, NULL, :t FROM generate_series(1, 30000) AS g"), {"t": NOW})
    with db.engine.connect() as conn:
        conn.exec_driver_sql("SELECT pg_stat_force_next_flush()")  # counters reach shared memory
        conn.commit()
    db.engine.dispose()
    deadline = time.monotonic() + 10  # the server publishes its counters asynchronously
    while changed_since_analyze(db, "predictions") < 30_000 and time.monotonic() < deadline:
        time.sleep(0.1)
    assert changed_since_analyze(db, "predictions") >= 30_000

    assert "predictions" in table_statistics.analyze_if_stale(db.engine, NOW)
    with db.engine.connect() as conn:
        analyzed = conn.execute(sa.text(
            "SELECT reltuples FROM pg_class WHERE oid = 'predictions'::regclass")).scalar()
    assert analyzed == 30_000  # ANALYZE counted the table (its estimate was -1: never analyzed)
    # within the interval nothing is analyzed again, whatever changed meanwhile
    assert table_statistics.analyze_if_stale(db.engine, NOW + timedelta(minutes=1)) == []
