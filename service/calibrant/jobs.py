"""Every scheduled job, and "run them all until no work is left".

A job is a plain function of a ``JobContext`` that returns its figures (counts of
what it did); each claims its units of work in the database, so any number of
processes may run them at once. ``app.create_app`` and the ``calibrant`` command
build the context; the scheduler and a refresh job (``refresh_job``) call ``run_all``.
"""

from __future__ import annotations

import os
import socket
from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol, TypedDict

from calibrant.alarms import jobs as alarm_jobs
from calibrant.clock import Clock
from calibrant.config import Settings
from calibrant.models.isolation import Backoff, ModelGuard
from calibrant.notify import jobs as notify_jobs
from calibrant.notify.senders import Sender, sender_from_settings
from calibrant.retention import job as retention_job
from calibrant.rollup import refresh
from calibrant.store.dirty import BucketKey
from calibrant.store.engine import make_session_factory
from calibrant.store.unit import Engine

JobFigures = dict[str, int]
"""What one job run did, as named counts ("buckets", "opened", "delivered", ...)."""


class RunReport(TypedDict):
    """``run_all``'s answer: the rounds it took and each job's figures, summed over them."""

    rounds: int
    jobs: dict[str, JobFigures]


def worker_name() -> str:
    """Identifies this process in claims and job runs."""
    return f"{socket.gethostname()}:{os.getpid()}"[:64]


class JobProgress(Protocol):
    """Hears how far ``run_all`` got: a refresh job's progress (``refresh_job``)."""

    def phase(self, job: str, round_: int) -> None: ...

    def buckets_done(self, keys: list[BucketKey]) -> None: ...


@dataclass(frozen=True, slots=True)
class JobContext:
    """What a job may use; built by the composition roots (serve, scheduler, refresh)."""

    engine: Engine
    clock: Clock
    settings: Settings
    webhook_sender: Sender | None = None  # None: the sender CALIBRANT_WEBHOOK_SENDER names
    progress: JobProgress | None = None  # None: nobody follows this run


@dataclass(frozen=True, slots=True)
class Job:
    name: str
    run: Callable[[JobContext], JobFigures]


def _guard(ctx: JobContext, job: str) -> ModelGuard:
    """Per-model isolation for one run of ``job`` (``models.isolation``), backoff from the settings."""
    return ModelGuard(ctx.engine, ctx.clock, job, Backoff.from_settings(ctx.settings))


def _refresh(ctx: JobContext) -> JobFigures:
    guard = _guard(ctx, refresh.JOB_NAME)
    on_buckets = ctx.progress.buckets_done if ctx.progress is not None else None
    return refresh.refresh_dirty(ctx.engine, ctx.clock, worker=worker_name(), guard=guard,
                                 on_buckets=on_buckets).as_dict()


def _alarms(ctx: JobContext) -> JobFigures:
    return alarm_jobs.run(ctx.engine, ctx.clock, _guard(ctx, alarm_jobs.JOB_NAME))


def _deliver(ctx: JobContext) -> JobFigures:
    sender = ctx.webhook_sender or sender_from_settings(
        ctx.settings.webhook_allow_private, ctx.settings.webhook_sender
    )
    return notify_jobs.deliver_due(make_session_factory(ctx.engine), ctx.clock, ctx.settings, sender,
                                   guard=_guard(ctx, notify_jobs.JOB_NAME)).as_dict()


def _retention(ctx: JobContext) -> JobFigures:
    return retention_job.apply_retention(ctx.engine, ctx.clock, ctx.settings, worker=worker_name(),
                                         guard=_guard(ctx, retention_job.JOB_NAME)).as_dict()


# Order matters within a round: summaries first, then what reads them, delivery next, so one
# round takes an ingest all the way to a webhook; retention last, once the round's hours are
# summarised (it never removes rows of an hour still waiting for its refresh).
JOBS: tuple[Job, ...] = (
    Job(refresh.JOB_NAME, _refresh),
    Job(alarm_jobs.JOB_NAME, _alarms),
    Job(notify_jobs.JOB_NAME, _deliver),
    Job(retention_job.JOB_NAME, _retention),
)


def run_all(ctx: JobContext, max_rounds: int = 20) -> RunReport:
    """Run every job until a whole round does no work; return what each did, summed."""
    totals: dict[str, JobFigures] = {job.name: {} for job in JOBS}
    rounds = 0
    for rounds in range(1, max_rounds + 1):
        busy = False
        for job in JOBS:
            if ctx.progress is not None:
                ctx.progress.phase(job.name, rounds)
            done = job.run(ctx)
            for key, value in done.items():
                totals[job.name][key] = totals[job.name].get(key, 0) + value
            # "busy" counts work held by another worker: not work this round did
            busy |= any(v > 0 for k, v in done.items() if k != "busy")
        if not busy:
            break
    return {"rounds": rounds, "jobs": totals}
