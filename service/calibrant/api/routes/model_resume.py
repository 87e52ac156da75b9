"""``POST /v1/models/{model}/resume``: an admin lets every job take a model it had held back."""

from __future__ import annotations

from fastapi import APIRouter

from calibrant.api.deps import Admin, RuntimeDep
from calibrant.api.job_failure_schemas import JobFailureOut, ResumeOut
from calibrant.api.schemas import PROBLEM_RESPONSES
from calibrant.models import isolation, service
from calibrant.store.unit import Session

router = APIRouter(prefix="/v1/models", tags=["models"])


@router.post(
    "/{model}/resume",
    response_model=ResumeOut,
    responses={**PROBLEM_RESPONSES, 404: {"description": "No such model (problem details)."}},
    summary="Clear the model's job failures (quarantined or waiting for a retry); audited",
    description="A job that fails on one model records the failure, retries it with exponential backoff "
    "and, after CALIBRANT_JOB_QUARANTINE_AFTER failed attempts, quarantines the model: that job skips it "
    "until this call. Every job takes the model again at its next run; a failure that persists is "
    "recorded afresh. Needs the admin scope; written to the audit trail as `model.resumed`.",
)
async def resume(model: str, runtime: RuntimeDep, caller: Admin) -> ResumeOut:
    def work(session: Session) -> ResumeOut:
        row = service.require(session, model)
        cleared = isolation.resume(session, row, actor=caller.actor, now=runtime.clock.now())
        return ResumeOut(model=row.name, cleared=[JobFailureOut.of(r) for r in cleared])

    return await runtime.run(work)
