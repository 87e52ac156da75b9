"""What a running app holds: settings, engine, sessions, clock, the job port.

Built by ``calibrant.app.create_app``; routes receive it through ``api.deps``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any, Protocol, TypeVar

from starlette.concurrency import run_in_threadpool

from calibrant.clock import Clock
from calibrant.config import Settings
from calibrant.notify.senders import LoggingSender, Sender
from calibrant.notify.targets import Resolver, system_resolver
from calibrant.store.unit import Engine, Session, SessionFactory, run_unit_of_work

T = TypeVar("T")


class JobView(Protocol):
    """A refresh job as the API shows it (``store.refresh_job_repo.JobRow`` is one)."""

    @property
    def id(self) -> str: ...
    @property
    def state(self) -> str: ...
    @property
    def worker(self) -> str: ...
    @property
    def requested_by(self) -> str: ...
    @property
    def started_at(self) -> datetime: ...
    @property
    def heartbeat_at(self) -> datetime: ...
    @property
    def finished_at(self) -> datetime | None: ...
    @property
    def progress(self) -> dict[str, Any]: ...
    @property
    def result(self) -> dict[str, Any] | None: ...
    @property
    def errors(self) -> list[str]: ...


class JobRunner(Protocol):
    """The job port: POST /v1/refresh starts (or joins) a refresh job; GET reads it.

    The API never imports the jobs; the composition root supplies this (``refresh_job.RefreshJobs``).
    """

    def start(self, requested_by: str) -> JobView: ...

    def get(self, job_id: str) -> JobView | None: ...


@dataclass
class Runtime:
    settings: Settings
    engine: Engine
    sessions: SessionFactory
    clock: Clock
    jobs: JobRunner
    webhook_sender: Sender = field(default_factory=LoggingSender)
    resolver: Resolver = system_resolver  # webhook targets' names -> addresses

    def unit_of_work(self, work: Callable[[Session], T], attempts: int = 3) -> T:
        """Run ``work`` in one transaction and commit; a return means committed (``store.unit``)."""
        return run_unit_of_work(self.sessions, work, attempts)

    async def run(self, work: Callable[[Session], T]) -> T:
        """``unit_of_work`` off the event loop, in the thread pool."""
        return await run_in_threadpool(self.unit_of_work, work)
