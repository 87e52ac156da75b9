"""A database held locked by someone else answers 503 with Retry-After, and 2xx once released.

SQLite: another connection holds the write lock (BEGIN IMMEDIATE); PostgreSQL:
another transaction holds the model's row lock that outcome batches take. The
request waits at most ``db_lock_seconds`` (1 s here), then answers 503;
nothing of it is stored. Once the lock goes the same request succeeds.
"""

from __future__ import annotations

from calibrant.store.engine import make_engine
from tests.api.payloads import count_rows, outcome, post_outcomes, post_predictions, prediction
from tests.conftest import Database, make_client


def test_a_held_lock_answers_503_then_the_retry_succeeds(db: Database) -> None:
    impatient = Database(db.dialect, db.url, make_engine(db.settings(db_lock_seconds=1)))
    with make_client(impatient, db_lock_seconds=1, retry_after_seconds=7) as client:
        assert post_predictions(client, "held", [prediction("a")]).status_code == 200
        holder = db.engine.connect()
        if db.dialect == "sqlite":
            holder.exec_driver_sql("SELECT 1")  # begins IMMEDIATE: the write lock is ours
        else:
            holder.exec_driver_sql("SELECT id FROM models WHERE name = 'held' FOR UPDATE")
        try:
            locked = post_outcomes(client, "held", [outcome("a", 1)])
        finally:
            holder.rollback()
            holder.close()
        assert locked.status_code == 503, locked.text
        assert locked.headers["Retry-After"] == "7"
        assert locked.json()["type"].endswith("/database-unavailable")
        assert count_rows(db, "outcomes") == 0
        assert post_outcomes(client, "held", [outcome("a", 1)]).status_code == 200
    assert count_rows(db, "outcomes") == 1
    impatient.engine.dispose()
