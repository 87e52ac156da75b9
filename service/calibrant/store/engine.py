"""Engines and sessions, made from settings (no import-time globals).

SQLite: WAL, a busy timeout, foreign keys, a large page cache, and every
transaction that may write opened with ``BEGIN IMMEDIATE``. A deferred transaction
that later writes fails with SQLITE_BUSY at once, ignoring the busy timeout; taking
the write lock up front makes concurrent writers queue instead. A transaction that
only reads opens with a plain (deferred) ``BEGIN``: in WAL mode it reads a snapshot
and never waits for the writer. Reads are those inside ``read_only()`` (every GET
and HEAD request, ``api.read_requests``) or on a connection from ``unit.reading``.
Python 3.11's sqlite3 driver opens transactions on its own, so we switch that off
and emit BEGIN ourselves (SQLAlchemy's documented recipe for pysqlite).
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from contextvars import ContextVar
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

from calibrant.config import Settings
from calibrant.store import deadlines

_SQLITE_JOB_BUSY_MS = 30_000
READ_OPTION = "calibrant_read_only"  # a connection execution option: its transactions only read
_READ_ONLY: ContextVar[bool] = ContextVar("calibrant_read_only", default=False)


@contextlib.contextmanager
def read_only() -> Iterator[None]:
    """Transactions begun inside this block (and threads it starts) only read: deferred on SQLite.

    One that writes anyway (a GET that creates a model's default rules the first time) works
    while no other writer holds the lock; under contention it fails with "database is locked",
    and ``unit.run_unit_of_work`` runs it again inside ``may_write``, queueing for the lock.
    """
    token = _READ_ONLY.set(True)
    try:
        yield
    finally:
        _READ_ONLY.reset(token)


@contextlib.contextmanager
def may_write() -> Iterator[None]:
    """Undo ``read_only`` for this block: its transactions begin ``BEGIN IMMEDIATE`` again."""
    token = _READ_ONLY.set(False)
    try:
        yield
    finally:
        _READ_ONLY.reset(token)


def reads_only() -> bool:
    """True inside ``read_only`` (and not inside a ``may_write`` within it)."""
    return _READ_ONLY.get()


def make_engine(settings: Settings, **overrides: Any) -> Engine:
    url = make_url(settings.database_url)
    if url.get_backend_name() == "sqlite":
        return _sqlite_engine(settings, url, **overrides)
    connect_args: dict[str, Any] = {"connect_timeout": settings.db_connect_seconds}
    kwargs: dict[str, Any] = {
        "pool_size": settings.db_pool_size,
        "max_overflow": settings.db_pool_size,
        "pool_pre_ping": True,
        # waiting for a free connection counts against a request's deadline
        "pool_timeout": settings.request_seconds,
        "connect_args": connect_args,
    }
    if not settings.postgres_prepared_statements:
        # psycopg prepares a statement on the server after its 5th run on a connection; behind a
        # transaction-mode pooler the next transaction may reach another server connection that has
        # never seen it. None turns preparing off (deploy/README.md, "Connection poolers").
        connect_args["prepare_threshold"] = None
    kwargs.update(overrides)
    engine = create_engine(url, **kwargs)
    statement_ms = int(settings.db_statement_seconds * 1000)
    lock_ms = int(settings.db_lock_seconds * 1000)

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Set per connection rather than in the URL's options, which may already carry a search_path.
        with dbapi_conn.cursor() as cur:
            cur.execute(f"SET statement_timeout = {statement_ms}")
            cur.execute(f"SET lock_timeout = {lock_ms}")
        dbapi_conn.commit()

    deadlines.install(engine, settings.job_seconds)
    return engine


def _sqlite_engine(settings: Settings, url: Any, **overrides: Any) -> Engine:
    database = url.database
    if database and database != ":memory:" and not database.startswith("file:"):
        Path(database).parent.mkdir(parents=True, exist_ok=True)
    engine = create_engine(url, connect_args={"timeout": _SQLITE_JOB_BUSY_MS / 1000}, **overrides)
    request_busy_ms = int(settings.db_lock_seconds * 1000)
    cache_kib = settings.sqlite_cache_mib * 1024
    synchronous = settings.sqlite_synchronous

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        dbapi_conn.isolation_level = None  # we issue BEGIN ourselves, below
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute(f"PRAGMA synchronous={synchronous}")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute(f"PRAGMA busy_timeout={_SQLITE_JOB_BUSY_MS}")
        cur.execute(f"PRAGMA cache_size=-{cache_kib}")
        cur.execute("PRAGMA wal_autocheckpoint=10000")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Any) -> None:
        reads_only = _READ_ONLY.get() or conn.get_execution_options().get(READ_OPTION, False)
        conn.exec_driver_sql("BEGIN" if reads_only else "BEGIN IMMEDIATE")

    @event.listens_for(engine, "checkout")
    def _on_checkout(dbapi_conn: Any, _record: Any, _proxy: Any) -> None:
        # A request waits for the write lock at most db_lock_seconds, then answers 503; a job waits
        # longer, since nobody is waiting on its answer.
        busy_ms = request_busy_ms if deadlines.in_request() else _SQLITE_JOB_BUSY_MS
        dbapi_conn.execute(f"PRAGMA busy_timeout={busy_ms}")

    deadlines.install(engine, settings.job_seconds)
    return engine


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(engine, expire_on_commit=False)
