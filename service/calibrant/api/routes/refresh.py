"""POST /v1/refresh: run every scheduled job until no work is left."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from fastapi import APIRouter
from starlette.concurrency import run_in_threadpool

from calibrant.api.deps import Admin, RuntimeDep
from calibrant.api.job_schemas import RefreshOut
from calibrant.api.schemas import PROBLEM_RESPONSES

router = APIRouter(tags=["jobs"])


@router.post(
    "/v1/refresh",
    response_model=RefreshOut,
    responses=PROBLEM_RESPONSES,
    summary="Run every job until no work is left",
)
async def refresh(runtime: RuntimeDep, _caller: Admin) -> Mapping[str, Any]:
    # The jobs arrive through the runtime's job port: the API never imports them.
    return await run_in_threadpool(runtime.jobs.run_all)
