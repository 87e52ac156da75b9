"""``create_app(settings)``: the composition root, the only way to build the HTTP application.

The one place that wires the HTTP routers, the refresh jobs (``refresh_job``) and the
scheduler into one process; the API reaches the jobs only through ``Runtime.jobs``.
"""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI

import calibrant
from calibrant import jobs, scheduler
from calibrant.api import problems
from calibrant.api.deadline import RequestDeadline
from calibrant.api.read_requests import ReadOnlyRequests
from calibrant.api.request_gate import RequestGate
from calibrant.api.routes import (
    alarms,
    audit,
    health,
    ingest,
    metrics,
    model_resume,
    models,
    openmetrics,
    refresh,
    reports,
    rules,
    webhooks,
)
from calibrant.api.runtime import Runtime
from calibrant.api.schemas import add_body_schemas
from calibrant.clock import Clock, SystemClock
from calibrant.config import Settings
from calibrant.notify.senders import Sender, sender_from_settings
from calibrant.notify.targets import Resolver, system_resolver
from calibrant.pages.router import PageHost, build_router
from calibrant.refresh_job import RefreshJobs
from calibrant.store.engine import make_engine, make_session_factory
from calibrant.store.unit import Engine

DESCRIPTION = """Calibrant joins the probabilities your deployed binary classifiers emit with the
outcomes that arrive later, and reports how honest those probabilities still are.

Monitoring signals support, and do not replace, model validation, local regulation and
qualified review where decisions affect people."""


def create_app(
    settings: Settings,
    *,
    engine: Engine | None = None,
    clock: Clock | None = None,
    webhook_sender: Sender | None = None,
    resolver: Resolver | None = None,
    run_scheduler: bool = False,
) -> FastAPI:
    owns_engine = engine is None
    engine = engine or make_engine(settings)
    clock = clock or SystemClock()
    resolver = resolver or system_resolver
    webhook_sender = webhook_sender or sender_from_settings(
        settings.webhook_allow_private, settings.webhook_sender, resolver
    )
    job_context = jobs.JobContext(engine, clock, settings, webhook_sender)
    runtime = Runtime(
        settings=settings,
        engine=engine,
        sessions=make_session_factory(engine),
        clock=clock,
        jobs=RefreshJobs(job_context, lease_seconds=settings.refresh_job_lease_seconds),
        webhook_sender=webhook_sender,
        resolver=resolver,
    )

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        # `calibrant serve` runs the jobs in-process unless told not to (several replicas).
        jobs_scheduler = scheduler.build(job_context) if run_scheduler else None
        if jobs_scheduler is not None:
            jobs_scheduler.start()
        yield
        if jobs_scheduler is not None:
            jobs_scheduler.shutdown(wait=False)
        if owns_engine:
            engine.dispose()

    app = FastAPI(
        title="Calibrant",
        version=calibrant.__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
    )
    app.state.runtime = runtime  # read back only by api.deps.get_runtime
    problems.install(app, settings.retry_after_seconds)
    # Added first, so it runs inside the gate: a slow upload is not held against the deadline.
    app.add_middleware(RequestDeadline, seconds=settings.request_seconds,
                       retry_after=settings.retry_after_seconds)
    app.add_middleware(ReadOnlyRequests)
    app.add_middleware(RequestGate, max_body_bytes=settings.max_body_bytes)
    app.include_router(health.router)
    app.include_router(openmetrics.router)
    app.include_router(ingest.router)
    app.include_router(models.router)
    app.include_router(model_resume.router)
    app.include_router(metrics.router)
    app.include_router(refresh.router)
    app.include_router(webhooks.router)
    app.include_router(rules.router)
    app.include_router(alarms.router)
    app.include_router(audit.router)
    app.include_router(reports.router)
    app.include_router(build_router(PageHost(settings, runtime.sessions, clock)))

    def openapi() -> dict:
        if app.openapi_schema is None:
            app.openapi_schema = add_body_schemas(FastAPI.openapi(app))
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]  # FastAPI's documented extension point
    return app
