"""Liveness, database reachability, and the models a background job failed on.

Three states: ``ok`` (200); ``degraded`` (200: requests and ingest work, but some job is
holding back some models, named in ``job_failures``); ``down`` (503 with Retry-After: the
database does not answer). Degraded stays 200 so that a load balancer keeps a server that
works for every other model; monitors read ``status``.
"""

from __future__ import annotations

import asyncio

from fastapi import APIRouter
from fastapi.responses import JSONResponse
from starlette.concurrency import run_in_threadpool

from calibrant.api.deps import RuntimeDep
from calibrant.api.job_failure_schemas import JobFailureOut
from calibrant.api.runtime import Runtime
from calibrant.api.schemas import Health, HealthDetail
from calibrant.api.webhook_schemas import OutboxHealth
from calibrant.models import isolation
from calibrant.store import outbox_repo, webhook_targets_repo
from calibrant.store.unit import DatabaseError, ping

router = APIRouter(tags=["health"])


@router.get("/healthz", response_model=Health, summary="Is the service able to store data?")
async def healthz(runtime: RuntimeDep) -> JSONResponse:
    def probe() -> str | None:
        try:
            ping(runtime.engine)
        except DatabaseError as exc:
            return type(exc).__name__
        return None

    # The probe's own deadline is half the request's, so a stalled database is named here, in the
    # body, before the request deadline answers for it; the stuck thread is freed by store.deadlines.
    limit = runtime.settings.request_seconds / 2
    try:
        error = await asyncio.wait_for(asyncio.shield(run_in_threadpool(probe)), limit)
    except TimeoutError:
        error = f"no answer within {limit:g} s"
    if error:
        health = Health(status="down", database="unreachable", failed=["database"],
                        detail=HealthDetail(error=error))
        return JSONResponse(health.model_dump(mode="json"), status_code=503,
                            headers={"Retry-After": str(runtime.settings.retry_after_seconds)})
    outbox, failures = await run_in_threadpool(_outbox_and_failures, runtime)
    health = Health(
        status="degraded" if failures else "ok", database="ok", failed=["jobs"] if failures else [],
        job_failures=failures, detail=HealthDetail(dialect=runtime.engine.dialect.name), outbox=outbox,
    )
    return JSONResponse(health.model_dump(mode="json"))


def _outbox_and_failures(runtime: Runtime) -> tuple[OutboxHealth, list[JobFailureOut]]:
    """The webhook backlog and the targets that keep failing (they do not make the service degraded),
    and every model a job failed on (it does)."""
    with runtime.sessions() as session:
        backlog = outbox_repo.backlog(session, runtime.clock.now())
        failing = [t.id for t in webhook_targets_repo.failing(session)]
        failures = [JobFailureOut.of(r) for r in isolation.failures(session)]
    return OutboxHealth(
        pending=backlog.pending,
        due=backlog.due,
        oldest_pending_at=backlog.oldest_pending_at,
        failing_webhooks=failing,
    ), failures
