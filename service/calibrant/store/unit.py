"""The unit of work, and the database types the layers above ``store`` may name.

``store`` is the only package that imports SQLAlchemy (docs/architecture.md).
Services receive a ``Session`` and pass it to repositories; the API and jobs
hold an ``Engine`` and a ``SessionFactory``. They name these types through this
module, so the rule "no SQLAlchemy above the store" has one exception, and it
is a re-export.
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Callable, Iterator
from typing import TypeVar

from sqlalchemy import Connection, Engine, event, text
from sqlalchemy.exc import DBAPIError, DisconnectionError, InterfaceError, OperationalError, SQLAlchemyError
from sqlalchemy.exc import TimeoutError as PoolTimeout
from sqlalchemy.orm import Session, SessionTransaction, sessionmaker

from calibrant.store.engine import READ_OPTION, may_write, read_only, reads_only

__all__ = [
    "UNAVAILABLE_ERRORS",
    "Connection",
    "DatabaseError",
    "Engine",
    "Session",
    "SessionFactory",
    "after_commit",
    "is_unavailable",
    "ping",
    "read_only",
    "reading",
    "run_unit_of_work",
]

T = TypeVar("T")
SessionFactory = sessionmaker[Session]
DatabaseError = SQLAlchemyError

# The database is down, stalled (its connection cut by ``store.deadlines``), locked past the lock
# timeout, or no pooled connection came free in time: a state that passes, not a bug.
UNAVAILABLE_ERRORS: tuple[type[Exception], ...] = (
    OperationalError, InterfaceError, DisconnectionError, PoolTimeout,
)


def is_unavailable(exc: BaseException) -> bool:
    """True when ``exc`` says the database cannot answer now (answered 503), not that we erred."""
    if isinstance(exc, UNAVAILABLE_ERRORS):
        return True
    return isinstance(exc, DBAPIError) and bool(exc.connection_invalidated)

# PostgreSQL SQLSTATEs worth one more try: serialization failure, deadlock detected.
_RETRYABLE_SQLSTATES = {"40001", "40P01"}


def run_unit_of_work(sessions: SessionFactory, work: Callable[[Session], T], attempts: int = 3) -> T:
    """Run ``work`` in one transaction and commit; a return means committed.

    A deadlock or serialization failure between concurrent transactions is
    retried: every ingest write is idempotent, so a rerun is harmless. On SQLite, a unit
    begun deferred (``read_only``: a GET) that wrote and found the write lock taken, or its
    snapshot outdated by a writer, is run once more as a writer (``BEGIN IMMEDIATE``).
    """
    upgrade = False  # SQLite: a read-only unit that wrote and met the lock runs again as a writer
    for attempt in range(1, attempts + 1):
        with may_write() if upgrade else contextlib.nullcontext(), sessions() as session:
            try:
                result = work(session)
                session.commit()
            except OperationalError as exc:
                session.rollback()
                if attempt < attempts and not upgrade and reads_only() and _sqlite_busy(exc):
                    upgrade = True
                    continue
                if attempt == attempts or _sqlstate(exc) not in _RETRYABLE_SQLSTATES:
                    raise
                time.sleep(0.01 * attempt)
                continue
            except BaseException:
                session.rollback()
                raise
            return result
    raise AssertionError("unreachable")


_AFTER_COMMIT = "calibrant_after_commit"


def after_commit(session: Session, callback: Callable[[], None]) -> None:
    """Call ``callback`` once the session's current transaction commits; never if it rolls back.

    For side effects that must not claim what did not happen (a log line saying an
    alarm opened): the change and the line then exist together or not at all.
    """
    pending: list[Callable[[], None]] | None = session.info.get(_AFTER_COMMIT)
    if pending is None:
        pending = session.info[_AFTER_COMMIT] = []
        event.listen(session, "after_commit", _run_pending)
        event.listen(session, "after_soft_rollback", _drop_pending)
    pending.append(callback)


def _run_pending(session: Session) -> None:
    callbacks = session.info.get(_AFTER_COMMIT) or []
    session.info[_AFTER_COMMIT] = []
    for callback in callbacks:
        callback()


def _drop_pending(session: Session, previous_transaction: SessionTransaction) -> None:
    # Any rollback of the outer transaction, even one with nothing to undo on the database; a
    # savepoint rolled back inside it leaves the outer transaction's callbacks pending.
    if not previous_transaction.nested:
        session.info[_AFTER_COMMIT] = []


@contextlib.contextmanager
def reading(engine: Engine) -> Iterator[Connection]:
    """A connection in a transaction that only reads (deferred on SQLite: it never waits for a writer).

    Ended by a rollback: there is nothing to commit, and a read that tried to write is undone.
    """
    with engine.connect().execution_options(**{READ_OPTION: True}) as conn, conn.begin() as tx:
        yield conn
        tx.rollback()


def ping(engine: Engine) -> None:
    """One round trip; raises ``DatabaseError`` when the database cannot answer."""
    with engine.connect() as conn:
        conn.execute(text("SELECT 1"))


# SQLITE_BUSY, and SQLITE_BUSY_SNAPSHOT (a deferred reader that tried to write after a commit)
_SQLITE_BUSY_CODES = {5, 517}


def _sqlite_busy(exc: OperationalError) -> bool:
    return getattr(exc.orig, "sqlite_errorcode", None) in _SQLITE_BUSY_CODES


def _sqlstate(exc: OperationalError) -> str | None:
    return getattr(exc.orig, "sqlstate", None)
