"""POST /v1/refresh starts (or joins) a refresh job; GET /v1/refresh-jobs/{id} follows it.

A refresh runs every scheduled job until no work is left; on a large backlog that
takes minutes, so the request does not wait for it: the answer is 202 with the job
at once, and the job runs in a background thread of the server. While a job runs,
anywhere on the database, a second POST answers with the same job. ``?wait=true``
keeps a synchronous answer for scripts and tests: 200 with the ended job, or 202
with the job as it stands when ``timeout`` seconds passed.
"""

from __future__ import annotations

import asyncio
import time
from typing import Annotated, Any

from fastapi import APIRouter, Path, Query, Response
from starlette.concurrency import run_in_threadpool

from calibrant.api.deps import Admin, RuntimeDep
from calibrant.api.job_schemas import RefreshJobOut
from calibrant.api.runtime import JobView, Runtime
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.clock import rfc3339
from calibrant.errors import NotFound

router = APIRouter(tags=["jobs"])
JOBS_PATH = "/v1/refresh-jobs"
DEFAULT_WAIT_S = 600.0
FIRST_POLL_S, LAST_POLL_S = 0.005, 0.5


# A job row written by an older or interrupted runner may lack some progress members.
_NO_PROGRESS: dict[str, Any] = {"phase": "starting", "round": 0, "buckets_done": 0, "buckets_total": 0,
                                "models": []}


def job_out(job: JobView) -> dict[str, Any]:
    return {
        "id": job.id, "state": job.state, "requested_by": job.requested_by, "worker": job.worker,
        "started_at": rfc3339(job.started_at), "heartbeat_at": rfc3339(job.heartbeat_at),
        "finished_at": rfc3339(job.finished_at) if job.finished_at is not None else None,
        "progress": {**_NO_PROGRESS, **job.progress}, "result": job.result, "errors": job.errors,
    }


@router.post(
    "/v1/refresh",
    response_model=RefreshJobOut,
    status_code=202,
    responses={**PROBLEM_RESPONSES,
               200: {"model": RefreshJobOut, "description": "With wait=true: the job ended in time."}},
    summary="Start a refresh job (or join the running one)",
    description="Runs every scheduled job (summaries, charts and rules, webhook delivery) until no work "
    "is left, in the background. Answers 202 at once with the job and its `Location`; while a job runs, "
    "anywhere on the database, the answer is that job. With `wait=true` the answer waits up to `timeout` "
    "seconds: 200 with the ended job, or 202 with the job as it stands.",
)
async def refresh(
    runtime: RuntimeDep,
    caller: Admin,
    response: Response,
    wait: Annotated[bool, Query(description="Wait for the job to end (up to `timeout`).")] = False,
    timeout: Annotated[float, Query(gt=0, le=86_400, description="Longest wait with wait=true, seconds.")]
    = DEFAULT_WAIT_S,
) -> dict[str, Any]:
    # The jobs arrive through the runtime's job port: the API never imports them.
    job = await run_in_threadpool(runtime.jobs.start, caller.actor)
    if wait:
        job = await _until_ended(runtime, job, timeout)
    response.headers["Location"] = f"{JOBS_PATH}/{job.id}"
    if job.state != "running":
        response.status_code = 200
    return job_out(job)


async def _until_ended(runtime: Runtime, job: JobView, timeout: float) -> JobView:
    """Poll the job's row until it ends or ``timeout`` seconds pass, holding no thread meanwhile.

    The first polls come quickly (a small refresh ends in milliseconds), then every half second.
    """
    deadline = time.monotonic() + timeout
    pause = FIRST_POLL_S
    while job.state == "running" and (remaining := deadline - time.monotonic()) > 0:
        await asyncio.sleep(min(pause, remaining))
        pause = min(pause * 2, LAST_POLL_S)
        seen = await run_in_threadpool(runtime.jobs.get, job.id)
        job = seen if seen is not None else job
    return job


@router.get(
    JOBS_PATH + "/{job_id}",
    response_model=RefreshJobOut,
    responses={**PROBLEM_RESPONSES, 404: {"description": "No job has this id (problem details)."}},
    summary="A refresh job: state, progress by model, errors, start and end",
)
async def get_job(
    runtime: RuntimeDep,
    _caller: Admin,
    job_id: Annotated[str, Path(max_length=64)],
) -> dict[str, Any]:
    job = await run_in_threadpool(runtime.jobs.get, job_id)
    if job is None:
        raise NotFound(f"no refresh job {job_id!r}")
    return job_out(job)
