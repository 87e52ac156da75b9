"""Application-level deadlines on database connections, and closing those that miss them.

A stalled network is invisible to the database server: no statement timeout
fires, TCP keepalives are answered, and a thread reading the socket waits for
ever. So each connection a caller holds carries a deadline: ``request_seconds``
when the caller is a request (``request_scope``), ``job_seconds`` otherwise. A
watchdog thread looks every ``_TICK_S`` and, for a connection past its
deadline, cuts it from outside: on PostgreSQL it shuts the socket down (the
blocked read returns at once with an error, SQLAlchemy sees a disconnect and
drops the connection, so the pool heals without a restart); on SQLite it
interrupts the running statement. The caller then gets an ``OperationalError``,
which the API answers as 503 with Retry-After (``unit.is_unavailable``).

The pool's pre-ping runs before SQLAlchemy's ``checkout`` event, so the
dialect's ``do_ping`` is wrapped to carry a deadline too.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket
import threading
import time
from collections.abc import Iterator
from contextvars import ContextVar
from typing import Any

from sqlalchemy import Engine, event

log = logging.getLogger("calibrant.store")
_TICK_S = 0.25

# Seconds a connection may be held by the current caller; None: the engine's job deadline.
_CALLER_SECONDS: ContextVar[float | None] = ContextVar("calibrant_db_deadline", default=None)


@contextlib.contextmanager
def request_scope(seconds: float) -> Iterator[None]:
    """Connections checked out inside this block (and threads started from it) get ``seconds``."""
    token = _CALLER_SECONDS.set(seconds)
    try:
        yield
    finally:
        _CALLER_SECONDS.reset(token)


def in_request() -> bool:
    """True inside ``request_scope``: the caller is a request that someone is waiting on."""
    return _CALLER_SECONDS.get() is not None


class Watchdog:
    """Connections held now, each with its deadline; cuts those that run past it."""

    def __init__(self, default_seconds: float) -> None:
        self.default_seconds = default_seconds
        self._held: dict[int, tuple[Any, float]] = {}
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.cut = 0  # connections cut so far (for tests and logs)

    def hold(self, dbapi_conn: Any) -> None:
        seconds = _CALLER_SECONDS.get() or self.default_seconds
        with self._lock:
            self._held[id(dbapi_conn)] = (dbapi_conn, time.monotonic() + seconds)
            if self._thread is None:
                self._thread = threading.Thread(target=self._watch, name="calibrant-db-deadlines",
                                                daemon=True)
                self._thread.start()

    def release(self, dbapi_conn: Any) -> None:
        with self._lock:
            self._held.pop(id(dbapi_conn), None)

    def stop(self) -> None:
        self._stop.set()

    def _watch(self) -> None:
        while not self._stop.wait(_TICK_S):
            now = time.monotonic()
            with self._lock:
                if not self._held:  # nothing to watch: end; the next hold starts a new thread
                    self._thread = None
                    return
                late = [conn for conn, deadline in self._held.values() if deadline <= now]
                for conn in late:
                    self._held.pop(id(conn), None)
            for conn in late:
                self.cut += 1
                log.warning("database connection cut: it ran past its deadline")
                _cut(conn)


def _cut(dbapi_conn: Any) -> None:
    """Make the thread blocked on this connection return with an error, from another thread."""
    pgconn = getattr(dbapi_conn, "pgconn", None)
    if pgconn is not None:  # psycopg: shut the socket down under libpq's feet
        try:
            fd = os.dup(pgconn.socket)
        except Exception:  # already closed: nothing is blocked on it
            return
        with socket.socket(fileno=fd) as sock, contextlib.suppress(OSError):
            sock.shutdown(socket.SHUT_RDWR)
        return
    interrupt = getattr(dbapi_conn, "interrupt", None)
    if interrupt is not None:  # sqlite3: abort the running statement
        with contextlib.suppress(Exception):
            interrupt()


def install(engine: Engine, job_seconds: float) -> Watchdog:
    """Give every connection ``engine`` hands out a deadline; returns the watchdog."""
    watchdog = Watchdog(job_seconds)
    event.listen(engine, "checkout", lambda dbapi_conn, _rec, _proxy: watchdog.hold(dbapi_conn))
    event.listen(engine, "checkin", lambda dbapi_conn, _rec: watchdog.release(dbapi_conn))
    event.listen(engine, "close", lambda dbapi_conn, _rec: watchdog.release(dbapi_conn))
    dialect = engine.dialect
    plain_ping = dialect.do_ping

    def ping_with_deadline(dbapi_conn: Any) -> bool:
        watchdog.hold(dbapi_conn)
        try:
            return plain_ping(dbapi_conn)
        finally:
            watchdog.release(dbapi_conn)

    # The pre-ping is not covered by the checkout event; an instance attribute shadows the method.
    dialect.do_ping = ping_with_deadline  # type: ignore[method-assign,assignment]
    return watchdog
