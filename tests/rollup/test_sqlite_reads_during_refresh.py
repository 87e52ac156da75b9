"""SQLite: reads never queue behind the refresh's writes (GET requests begin deferred transactions).

A refresh of many buckets runs in a thread; the test stops it inside one of its write transactions,
with SQLite's write lock held, and issues requests then. Without a clock: the app waits for a lock
at most ``db_lock_seconds`` (1 s) and then answers 503, so a 200 from a GET shows it did not wait
for the lock at all, and the 503 of an ingest issued at the same moment shows the lock was held.
Before reads began deferred, every GET began ``BEGIN IMMEDIATE`` and answered that same 503.
"""

from __future__ import annotations

import threading
from datetime import UTC, datetime, timedelta

import pytest
from sqlalchemy import event

from calibrant.clock import FixedClock
from calibrant.rollup.refresh import refresh_dirty
from calibrant.store.engine import make_engine
from tests.api.payloads import count_rows
from tests.conftest import Database, make_client

NOW = datetime(2026, 3, 10, 12, tzinfo=UTC)
HOURS = 48
STOP_AT_COMMIT = 2  # the refresh's second write transaction: the first store of summaries


@pytest.mark.parametrize("db", ["sqlite"], indirect=True)  # PostgreSQL readers never wait for writers
def test_reads_answer_while_the_refresh_holds_the_write_lock(db: Database) -> None:
    clock = FixedClock(NOW)
    impatient = Database(db.dialect, db.url, make_engine(db.settings(db_lock_seconds=1)))
    start = NOW - timedelta(days=3)
    span = {"start": start.isoformat(), "end": NOW.isoformat(), "granularity": "day"}
    with make_client(impatient, clock, db_lock_seconds=1, retry_after_seconds=3) as client:
        items = [{"id": f"c{h}-{i}", "probability": 0.05 + 0.9 * i / 10,
                  "scored_at": (start + timedelta(hours=h)).isoformat()}
                 for h in range(HOURS) for i in range(10)]
        assert client.post("/v1/models/m/predictions", json={"predictions": items}).status_code == 200

        refresher = threading.current_thread()
        holding, release = threading.Event(), threading.Event()
        commits = 0

        def hold_before_commit(_conn) -> None:
            nonlocal commits
            if threading.current_thread() is not refresher:
                return
            commits += 1
            if commits == STOP_AT_COMMIT:
                holding.set()
                assert release.wait(60), "the test never released the refresh"

        event.listen(db.engine, "commit", hold_before_commit)
        errors: list[BaseException] = []

        def run() -> None:
            try:
                refresh_dirty(db.engine, clock, worker="held", group=4)
            except BaseException as exc:  # reported below
                errors.append(exc)

        thread = threading.Thread(target=run)
        refresher = thread
        thread.start()
        try:
            assert holding.wait(60), "the refresh never reached its write"
            reads = [client.get("/v1/models/m/metrics", params=span), client.get("/v1/models"),
                     client.get("/v1/models/m"), client.get("/metrics")]
            write = client.post("/v1/models/m/predictions", json={"predictions": [
                {"id": "late", "probability": 0.5, "scored_at": start.isoformat()}]})
        finally:
            release.set()
            thread.join(60)
            event.remove(db.engine, "commit", hold_before_commit)
        assert errors == []
        for r in reads:
            assert r.status_code == 200, (r.request.url, r.text)
        assert write.status_code == 503, write.text  # the control: the write lock really was held
        assert write.headers["Retry-After"] == "3"
    assert count_rows(db, "bucket_summaries") > 0
    assert count_rows(db, "dirty_buckets") == 0
    impatient.engine.dispose()


@pytest.mark.parametrize("db", ["sqlite"], indirect=True)
def test_a_get_that_writes_after_another_commit_runs_again_as_a_writer(db: Database) -> None:
    """The first GET of a model's rules creates its default rules. Begun deferred, it read a
    snapshot; another writer commits before its first INSERT, so SQLite refuses the write
    (SQLITE_BUSY_SNAPSHOT) and the unit of work runs again with ``BEGIN IMMEDIATE``: 200, once."""
    with make_client(db, FixedClock(NOW)) as client:
        item = {"id": "a", "probability": 0.4, "scored_at": (NOW - timedelta(days=1)).isoformat()}
        assert client.post("/v1/models/m/predictions", json={"predictions": [item]}).status_code == 200
        assert count_rows(db, "alarm_rules") == 0
        main = threading.current_thread()
        reached, committed = threading.Event(), threading.Event()

        def before_insert(_conn, _cursor, statement: str, *_rest) -> None:
            if threading.current_thread() is main or reached.is_set() or not statement.startswith("INSERT"):
                return
            reached.set()
            assert committed.wait(60)

        event.listen(db.engine, "before_cursor_execute", before_insert)

        def commit_elsewhere() -> None:
            assert reached.wait(60)
            with db.engine.begin() as conn:  # any write: the GET's snapshot is now outdated
                conn.exec_driver_sql(
                    "INSERT INTO job_runs (job, worker, started_at, finished_at, units, rows) "
                    "VALUES ('other', 'x', '2026-01-01', '2026-01-01', 0, 0)")
            committed.set()

        other = threading.Thread(target=commit_elsewhere)
        other.start()
        try:
            answer = client.get("/v1/models/m/rules")
        finally:
            committed.set()
            other.join(60)
            event.remove(db.engine, "before_cursor_execute", before_insert)
        assert reached.is_set()
        assert answer.status_code == 200, answer.text
        names = [r["name"] for r in answer.json()["rules"]]
        assert len(names) == len(set(names)) > 0
        assert count_rows(db, "alarm_rules") == len(names)
