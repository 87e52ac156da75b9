"""HTTP schemas for the OpenAPI document and responses.

Ingest bodies are validated column-wise by ``ingest.batch`` for speed; the
request models here describe the same rules so /docs stays accurate.
"""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, ClassVar, Literal

from pydantic import BaseModel, ConfigDict, Field

from calibrant.api.instant import Instant
from calibrant.api.job_failure_schemas import JobFailureOut
from calibrant.api.sparse import SparseModel
from calibrant.api.webhook_schemas import OutboxHealth


class PredictionIn(BaseModel):
    model_config = ConfigDict(extra="forbid")

    id: str = Field(min_length=1, max_length=200, description="The client's case id.")
    probability: float = Field(ge=0, le=1, description="Probability of the positive class.")
    scored_at: datetime = Field(description="RFC 3339 with offset; naive times are rejected.")
    version: str = Field("default", min_length=1, max_length=64)
    tags: dict[str, str] | None = Field(
        None, max_length=16, description="Flat string map; keys 1-64 of [A-Za-z0-9_.-], values <= 128."
    )


class PredictionBatchIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    predictions: list[PredictionIn] = Field(max_length=10_000)


class OutcomeIn(BaseModel):
    model_config = ConfigDict(extra="forbid")

    id: str = Field(min_length=1, max_length=200)
    label: Literal[0, 1] | bool
    observed_at: datetime = Field(description="When the outcome was reported: RFC 3339 with offset.")
    occurred_at: datetime | None = Field(
        None,
        description="When the event happened, if known (RFC 3339 with offset, not after observed_at). "
                    "With a horizon, an event that happened after it counts as 0; one that happened "
                    "inside it but was reported after horizon + lag is a late event and counts as 1.",
    )


class OutcomeBatchIn(BaseModel):
    model_config = ConfigDict(extra="forbid")
    outcomes: list[OutcomeIn] = Field(max_length=10_000)


class PredictionsAccepted(BaseModel):
    accepted: int = Field(description="New predictions stored.")
    duplicates: int = Field(description="Identical re-posts, stored already; nothing changed.")


class OutcomesAccepted(BaseModel):
    accepted: int = Field(description="Cases that got their first label.")
    duplicates: int = Field(description="The same label again; nothing changed.")
    corrected: int = Field(description="A different label: replaced, the old one kept in history.")


class ModelCountsOut(BaseModel):
    predictions: int
    outcomes: int
    labeled: int = Field(description="Predictions that have an outcome.")


class TrafficReferenceOut(BaseModel):
    """The model's own predictions scored in [start, end) are its reference."""

    kind: Literal["traffic"]
    start: Instant
    end: Instant
    version: str | None = Field(description="The one version used; null: all versions.")


class UploadedReferenceOut(BaseModel):
    """An uploaded validation set is the model's reference."""

    kind: Literal["uploaded"]
    n: int = Field(description="Probabilities in the uploaded set.")
    labeled: bool = Field(description="Whether the set came with labels.")
    description: str
    uploaded_at: Instant


ReferenceOut = Annotated[TrafficReferenceOut | UploadedReferenceOut, Field(discriminator="kind")]


class DelayQuantiles(BaseModel):
    p50: float
    p90: float
    p95: float
    p99: float


class DelayWeek(BaseModel):
    week_start: Instant = Field(description="Monday 00:00 UTC of the week the cases were scored in.")
    reported: int = Field(description="Cases of the week with an outcome so far.")
    events: int = Field(description="Of those, events (label 1 that happened inside the horizon).")
    late_events: int = Field(description="Events reported after horizon + lag.")
    median_days_so_far: float | None = Field(
        description="Median delay of the week's reports so far (short for recent weeks: later "
                    "reports are still to come); null when none."
    )


class OutcomeDelayOut(BaseModel):
    """The delay from scoring to the report of an outcome, measured from the model's own reports."""

    measured_at: Instant
    reports_measured: int = Field(
        description="Reports it was measured from (cases scored in the last 180 days; with implicit "
                    "negatives events only, since non-events never report)."
    )
    quantiles_days: DelayQuantiles = Field(
        description="Quantiles of the delay in days, by the product-limit estimator for right-"
                    "truncated data (docs/methods.md §23), so cases still waiting do not shorten it."
    )
    late_event_share: float | None = Field(
        description="Estimated share of events reported after horizon + lag; null without a horizon."
    )
    late_events: int = Field(description="Events seen reported after horizon + lag (last 180 days).")
    complete_after_days: float | None = Field(
        description="Age at which the rules treat a case as complete: horizon + lag, or the p95 delay "
                    "when it is longer and the late-event share exceeds 2 %; without a horizon the "
                    "p95 delay, null until it rests on 20 reports (the model's charts then read "
                    "nothing yet). Charts read a case only once it is this old."
    )
    by_week: list[DelayWeek] = Field(description="The last 12 weeks of scoring, oldest first.")


class ModelOut(BaseModel):
    name: str
    description: str
    outcome_horizon_days: int | None
    outcome_lag_days: int
    implicit_negatives: bool
    segment_keys: list[str]
    reference: ReferenceOut | None = Field(description="What score drift is judged against; null: none.")
    false_alarms_per_year: float = Field(
        description="The one false-alarm budget all of the model's rules share (expected a year)."
    )
    created_at: Instant
    updated_at: Instant
    counts: ModelCountsOut | None = None
    outcome_delay: OutcomeDelayOut | None = Field(
        None, description="The measured outcome delay; null until an outcome was reported and the "
                          "alarms job has measured it (at most hourly)."
    )
    job_failures: list[JobFailureOut] | None = Field(
        None, description="Jobs that failed on this model, retrying with backoff or quarantined (GET of one "
        "model; null in the list). Empty: every job processes the model."
    )


class ModelList(BaseModel):
    models: list[ModelOut]
    count: int


class CasePrediction(BaseModel):
    version: str
    probability: float
    scored_at: Instant
    tags: dict[str, str]
    received_at: Instant


class CaseOutcome(BaseModel):
    label: int
    observed_at: Instant
    occurred_at: Instant | None = None
    received_at: Instant
    revision: int


class CaseOut(BaseModel):
    model: str
    id: str
    predictions: list[CasePrediction]
    outcome: CaseOutcome | None
    history: list[CaseOutcome] = Field(description="Every label the case has had, oldest first.")


class HealthDetail(SparseModel):
    """``dialect`` when the database answers, ``error`` when it does not."""

    omitted_when_absent: ClassVar[frozenset[str]] = frozenset({"dialect", "error"})

    dialect: str | None = Field(None, description="The database dialect, e.g. sqlite or postgresql.")
    error: str | None = Field(None, description="The kind of error that kept the database from answering.")


class Health(BaseModel):
    status: Literal["ok", "degraded", "down"] = Field(
        description="ok (200): all is well. degraded (200): the service answers and stores data, but a "
        "background job failed on some models (`job_failures` names them); the other models are processed "
        "as usual. down (503, Retry-After): the database cannot be reached."
    )
    database: Literal["ok", "unreachable"]
    failed: list[str] = Field(
        default_factory=list,
        description="The checks that failed, by name (database, jobs); empty when none.",
    )
    job_failures: list[JobFailureOut] = Field(
        default_factory=list, description="Each model a job failed on, with the job and the error."
    )
    detail: HealthDetail = Field(default_factory=HealthDetail)
    outbox: OutboxHealth | None = Field(None, description="Webhook deliveries waiting, failing targets.")


PROBLEM_RESPONSES: dict[int | str, dict[str, Any]] = {
    401: {"description": "Missing or unknown API key (problem details)."},
    403: {"description": "The key's scope or model does not allow this (problem details)."},
    413: {"description": "Body larger than the limit (problem details)."},
    415: {"description": "A body not sent as application/json, plain or gzip (problem details)."},
    422: {"description": "Invalid input; `errors` lists {index, field, message} (problem details)."},
    503: {"description": "The database is down, stalled or locked; try again after `Retry-After` "
                         "seconds (problem details)."},
}


_REF = "#/components/schemas/{model}"
_RAW_BODY_MODELS: list[type[BaseModel]] = []


def request_body(model: type[BaseModel]) -> dict[str, Any]:
    """``openapi_extra`` documenting a body that the route reads raw (see ``add_body_schemas``)."""
    _RAW_BODY_MODELS.append(model)
    return {
        "requestBody": {
            "required": True,
            "content": {"application/json": {"schema": {"$ref": _REF.format(model=model.__name__)}}},
        }
    }


def add_body_schemas(openapi: dict[str, Any]) -> dict[str, Any]:
    """Put the raw-read body models, and the models they nest, into components/schemas.

    Two different models of one name would silently replace each other's schema: refused.
    """
    components = openapi.setdefault("components", {}).setdefault("schemas", {})
    for model in _RAW_BODY_MODELS:
        schema = model.model_json_schema(ref_template=_REF)
        for name, nested in [*schema.pop("$defs", {}).items(), (model.__name__, schema)]:
            if components.get(name, nested) != nested:
                raise ValueError(f"two schemas are named {name!r} in the OpenAPI document")
            components[name] = nested
    return openapi
