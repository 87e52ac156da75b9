"""Engines and sessions, made from settings (no import-time globals).

SQLite: WAL, a busy timeout, foreign keys, a large page cache, and every
transaction opened with ``BEGIN IMMEDIATE``. A deferred transaction that later
writes fails with SQLITE_BUSY at once, ignoring the busy timeout; taking the
write lock up front makes concurrent writers queue instead. Python 3.11's
sqlite3 driver opens transactions on its own, so we switch that off and emit
BEGIN ourselves (SQLAlchemy's documented recipe for pysqlite).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

from calibrant.config import Settings


def make_engine(settings: Settings, **overrides: Any) -> Engine:
    url = make_url(settings.database_url)
    if url.get_backend_name() == "sqlite":
        return _sqlite_engine(settings, url, **overrides)
    kwargs: dict[str, Any] = {
        "pool_size": settings.db_pool_size,
        "max_overflow": settings.db_pool_size,
        "pool_pre_ping": True,
    }
    if not settings.postgres_prepared_statements:
        # psycopg prepares a statement on the server after its 5th run on a connection; behind a
        # transaction-mode pooler the next transaction may reach another server connection that has
        # never seen it. None turns preparing off (deploy/README.md, "Connection poolers").
        kwargs["connect_args"] = {"prepare_threshold": None}
    kwargs.update(overrides)
    return create_engine(url, **kwargs)


def _sqlite_engine(settings: Settings, url: Any, **overrides: Any) -> Engine:
    database = url.database
    if database and database != ":memory:" and not database.startswith("file:"):
        Path(database).parent.mkdir(parents=True, exist_ok=True)
    engine = create_engine(url, connect_args={"timeout": 30}, **overrides)
    cache_kib = settings.sqlite_cache_mib * 1024
    synchronous = settings.sqlite_synchronous

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        dbapi_conn.isolation_level = None  # we issue BEGIN ourselves, below
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute(f"PRAGMA synchronous={synchronous}")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute("PRAGMA busy_timeout=30000")
        cur.execute(f"PRAGMA cache_size=-{cache_kib}")
        cur.execute("PRAGMA wal_autocheckpoint=10000")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Any) -> None:
        conn.exec_driver_sql("BEGIN IMMEDIATE")

    return engine


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(engine, expire_on_commit=False)
