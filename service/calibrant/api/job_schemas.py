"""Response model of POST /v1/refresh: what each job did, summed over the rounds it took."""

from __future__ import annotations

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
