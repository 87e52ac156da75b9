"""POST /v1/refresh: run every scheduled job until no work is left."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from starlette.concurrency import run_in_threadpool

from calibrant.api.auth import Principal, requires
from calibrant.api.job_schemas import RefreshOut
from calibrant.api.runtime import Runtime
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.jobs import run_all
from calibrant.store.keys_repo import Scope

router = APIRouter(tags=["jobs"])
Admin = Annotated[Principal, Depends(requires(Scope.ADMIN))]


@router.post(
    "/v1/refresh",
    response_model=RefreshOut,
    responses=PROBLEM_RESPONSES,
    summary="Run every job until no work is left",
)
async def refresh(request: Request, _caller: Admin) -> dict[str, Any]:
    runtime: Runtime = request.app.state.runtime
    return await run_in_threadpool(run_all, runtime.job_context())
