"""Response models of POST /v1/refresh and GET /v1/refresh-jobs/{id}: a refresh job and what it did."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, Field


class RefreshJobCounts(BaseModel):
    buckets: int = Field(description="Hourly summaries recomputed.")
    days: int = Field(description="Daily summaries merged from their hours.")
    rows_read: int = Field(description="Prediction rows read to recompute them.")
    requeued: int = Field(description="Recomputed while new rows arrived: queued again.")
    busy: int = Field(description="Held by another worker; left to it.")
    sealed: int = Field(0, description="Marks of hours before a retention boundary, cleared without "
                                       "recomputing (their raw rows are gone; the summaries stay).")


class AlarmJobCounts(BaseModel):
    cases: int = Field(description="Mature cases fed to chart streams.")
    designs: int = Field(description="Chart control limits designed.")
    periods: int = Field(description="Closed periods judged by window rules.")
    opened: int = Field(description="Alarms opened.")
    resolved: int = Field(description="Alarms resolved.")


class DeliveryJobCounts(BaseModel):
    attempted: int = Field(description="Webhook delivery attempts made.")
    delivered: int = Field(description="Deliveries the receiver accepted.")
    retrying: int = Field(description="Failed attempts with a retry due later.")
    failed: int = Field(description="Deliveries given up after the last retry.")
    claims_lost: int = Field(description="Claims that lapsed before the attempt (another worker took over).")


class RetentionJobCounts(BaseModel):
    sealed: int = Field(description="Models whose retention boundary advanced.")
    predictions: int = Field(description="Raw predictions removed.")
    outcomes: int = Field(description="Raw outcomes removed (cases without a prediction left).")
    outcome_revisions: int = Field(description="Label history rows of those outcomes removed.")
    deliveries: int = Field(description="Delivered webhook deliveries removed (with their attempts).")
    events: int = Field(description="Webhook events removed once no delivery referred to them.")
    audit_events: int = Field(description="Audit events removed.")


class JobCounts(BaseModel):
    refresh: RefreshJobCounts
    alarms: AlarmJobCounts
    deliver_webhooks: DeliveryJobCounts
    retention: RetentionJobCounts


class RefreshOut(BaseModel):
    rounds: int = Field(description="Rounds of every job run until one did no work.")
    jobs: JobCounts


class ModelProgressOut(BaseModel):
    model: str = Field(description="The model's name.")
    buckets_done: int = Field(description="Hour buckets of this model recomputed so far by this job.")
    buckets_total: int = Field(
        description="Hour buckets of this model waiting when the job started; it grows with buckets_done "
        "when rows ingested during the job add more."
    )


class JobProgressOut(BaseModel):
    phase: str = Field(
        description="What runs now: starting, refresh (summaries), alarms (charts and rules), "
        "deliver_webhooks, or finished."
    )
    round: int = Field(description="Round of every job, from 1; rounds repeat until one does no work.")
    buckets_done: int = Field(description="Hour buckets recomputed so far, every model.")
    buckets_total: int = Field(description="Hour buckets to recompute, every model (see the per-model note).")
    models: list[ModelProgressOut] = Field(description="Progress by model, by name.")


class RefreshJobOut(BaseModel):
    id: str = Field(description="The job's id; GET /v1/refresh-jobs/{id} reads it.")
    state: Literal["running", "succeeded", "failed", "abandoned"] = Field(
        description="running; succeeded; failed (see errors); abandoned (its process stopped writing "
        "its heartbeat for CALIBRANT_REFRESH_JOB_LEASE_SECONDS, so another job may run)."
    )
    requested_by: str = Field(description="Who started it: an API key's actor, local, or cli.")
    worker: str = Field(description="The process running it (host:pid).")
    started_at: str = Field(description="RFC 3339, UTC.")
    heartbeat_at: str = Field(description="When the runner last said it was alive (RFC 3339, UTC).")
    finished_at: str | None = Field(description="RFC 3339, UTC; null while it runs.")
    progress: JobProgressOut
    result: RefreshOut | None = Field(description="What each job did, once the job succeeded; else null.")
    errors: list[str] = Field(description="Why it failed or was abandoned, one line each; empty otherwise.")
