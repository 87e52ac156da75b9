"""What a running app holds: settings, engine, sessions, clock. Built by ``create_app``."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TypeVar

from sqlalchemy import Engine
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import Session, sessionmaker
from starlette.concurrency import run_in_threadpool

from calibrant.clock import Clock
from calibrant.config import Settings
from calibrant.jobs import JobContext
from calibrant.notify.senders import LoggingSender, Sender
from calibrant.notify.targets import Resolver, system_resolver

T = TypeVar("T")

# PostgreSQL SQLSTATEs worth one more try: serialization failure, deadlock detected.
_RETRYABLE_SQLSTATES = {"40001", "40P01"}


@dataclass
class Runtime:
    settings: Settings
    engine: Engine
    sessions: sessionmaker[Session]
    clock: Clock
    webhook_sender: Sender = field(default_factory=LoggingSender)
    resolver: Resolver = system_resolver  # webhook targets' names -> addresses

    def unit_of_work(self, work: Callable[[Session], T], attempts: int = 3) -> T:
        """Run ``work`` in one transaction and commit; a return means committed.

        A deadlock or serialization failure between concurrent batches is
        retried: every ingest write is idempotent, so a rerun is harmless.
        """
        for attempt in range(1, attempts + 1):
            with self.sessions() as session:
                try:
                    result = work(session)
                    session.commit()
                except OperationalError as exc:
                    session.rollback()
                    if attempt == attempts or _sqlstate(exc) not in _RETRYABLE_SQLSTATES:
                        raise
                    time.sleep(0.01 * attempt)
                    continue
                except BaseException:
                    session.rollback()
                    raise
                return result
        raise AssertionError("unreachable")

    def job_context(self) -> JobContext:
        return JobContext(self.engine, self.clock, self.settings, self.webhook_sender)

    async def run(self, work: Callable[[Session], T]) -> T:
        """``unit_of_work`` off the event loop, in the thread pool."""
        return await run_in_threadpool(self.unit_of_work, work)


def _sqlstate(exc: OperationalError) -> str | None:
    return getattr(exc.orig, "sqlstate", None)
