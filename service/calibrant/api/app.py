"""``create_app(settings)``: the only way to build the HTTP application."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI
from sqlalchemy import Engine

import calibrant
from calibrant import scheduler
from calibrant.api import problems
from calibrant.api.routes import alarms, health, ingest, metrics, models, refresh, rules, webhooks
from calibrant.api.runtime import Runtime
from calibrant.api.schemas import add_body_schemas
from calibrant.clock import Clock, SystemClock
from calibrant.config import Settings
from calibrant.notify.senders import Sender, sender_from_settings
from calibrant.notify.targets import Resolver, system_resolver
from calibrant.store.engine import make_engine, make_session_factory

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
    resolver = resolver or system_resolver
    runtime = Runtime(
        settings=settings,
        engine=engine,
        sessions=make_session_factory(engine),
        clock=clock or SystemClock(),
        webhook_sender=webhook_sender
        or sender_from_settings(settings.webhook_allow_private, settings.webhook_sender, resolver),
        resolver=resolver,
    )

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> AsyncIterator[None]:
        # `calibrant serve` runs the jobs in-process unless told not to (several replicas).
        jobs = scheduler.build(runtime.job_context()) if run_scheduler else None
        if jobs is not None:
            jobs.start()
        yield
        if jobs is not None:
            jobs.shutdown(wait=False)
        if owns_engine:
            engine.dispose()

    app = FastAPI(
        title="Calibrant",
        version=calibrant.__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
    )
    app.state.runtime = runtime
    problems.install(app)
    app.include_router(health.router)
    app.include_router(ingest.router)
    app.include_router(models.router)
    app.include_router(metrics.router)
    app.include_router(refresh.router)
    app.include_router(webhooks.router)
    app.include_router(rules.router)
    app.include_router(alarms.router)

    def openapi() -> dict:
        if app.openapi_schema is None:
            app.openapi_schema = add_body_schemas(FastAPI.openapi(app))
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]  # FastAPI's documented extension point
    return app
