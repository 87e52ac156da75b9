"""A model that a background job could not process: in /healthz, in GET of the model, and in its resume."""

from __future__ import annotations

from pydantic import BaseModel, Field

from calibrant.api.instant import Instant
from calibrant.store.job_failures_repo import FailureRecord


class JobFailureOut(BaseModel):
    model: str = Field(description="The model the job failed on.")
    job: str = Field(description="The job: refresh, alarms or deliver_webhooks.")
    error_class: str = Field(description="The kind of error the job met, e.g. ValueError.")
    error_message: str = Field(description="Its text (the server log has the traceback).")
    attempts: int = Field(description="Consecutive failed attempts.")
    first_seen_at: Instant
    last_seen_at: Instant
    retry_at: Instant | None = Field(
        description="When the job tries the model again (exponential backoff); null once quarantined."
    )
    quarantined: bool = Field(
        description="The attempts reached CALIBRANT_JOB_QUARANTINE_AFTER: the job skips the model until an "
        "admin resumes it (POST /v1/models/{model}/resume)."
    )
    quarantined_at: Instant | None = None

    @classmethod
    def of(cls, record: FailureRecord) -> JobFailureOut:
        return cls(
            model=record.model, job=record.job, error_class=record.error_class,
            error_message=record.error_message, attempts=record.attempts,
            first_seen_at=record.first_seen_at, last_seen_at=record.last_seen_at,
            retry_at=None if record.quarantined else record.retry_at, quarantined=record.quarantined,
            quarantined_at=record.quarantined_at,
        )


class ResumeOut(BaseModel):
    model: str
    cleared: list[JobFailureOut] = Field(
        description="The failures cleared (empty: nothing was held back); each job takes the model at its "
        "next run, and a failure that persists is recorded afresh."
    )
