"""Response models of the monitoring plan, the settings history and the governance report."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, Field

from calibrant.api.instant import Instant
from calibrant.api.metric_schemas import MetricPeriod
from calibrant.models.plan import ReviewCadence
from calibrant.vocabulary.metrics import MetricKey


class ToleranceOut(BaseModel):
    metric: MetricKey
    lower: float | None
    upper: float | None
    rule: str = Field(description="Name of the rule that watches the metric.")


class PlanOut(BaseModel):
    """A stored plan version: the fields of ``MonitoringPlan`` and when, by whom, which version."""

    model: str
    owner: str
    intended_use: str
    outcome_definition: str
    horizon_days: int | None
    tolerances: list[ToleranceOut]
    review_cadence: ReviewCadence
    escalation_contact: str
    version: int = Field(description="1 for the first plan, +1 per PUT.")
    recorded_at: Instant
    recorded_by: str
    versions: int | None = Field(None, description="How many versions the model's plan has had.")


class HistoryVersion(BaseModel):
    subject: Literal["settings", "rules"]
    recorded_at: Instant
    actor: str
    content: Any = Field(description="The whole settings object, or the list of rules, after the change.")


class InForceOut(BaseModel):
    content: Any
    recorded_at: Instant | None = Field(description="When this state was recorded; null: never changed.")
    actor: str | None


class HistoryOut(BaseModel):
    model: str
    at: Instant = Field(description="The instant `settings` and `rules` were in force.")
    settings: InForceOut
    rules: InForceOut
    versions: list[HistoryVersion] = Field(description="Every recorded version up to `at`, oldest first.")


class ArrivedLater(BaseModel):
    predictions: int
    first_labels: int
    corrections: int


class Restatements(BaseModel):
    checked_at: Instant
    arrived_after_as_of: ArrivedLater
    changed: list[dict[str, Any]] = Field(
        description="Per whole span or week and headline metric: the value as of as_of and now."
    )
    note: str | None = Field(
        None, description="Present when the report was served from its stored snapshot because "
                          "retention removed raw rows of the span: why nothing could be recomputed."
    )


class ReportOut(BaseModel):
    model: str
    start: Instant
    end: Instant
    as_of: Instant = Field(description="What the service knew at this instant is what the report shows.")
    caution: str
    plan: dict[str, Any] | None = Field(description="The monitoring plan version in force at as_of.")
    settings_in_force: InForceOut
    rules_in_force: InForceOut
    reference_note: str | None
    tolerances: list[dict[str, Any]] = Field(description="Each plan tolerance against the span's figure.")
    periods: list[MetricPeriod] = Field(description="ISO weeks, clipped to [start, end).")
    overall: dict[str, Any] = Field(description="The whole span, with the fields of a metrics period.")
    reliability: dict[str, Any]
    versions: list[dict[str, Any]]
    segments: list[dict[str, Any]]
    alarms: dict[str, Any]
    deliveries: dict[str, Any]
    changes_since_previous: dict[str, Any]
    content_hash: str = Field(
        description="SHA-256 of the canonical JSON (sorted keys) of every field above it, i.e. all but "
                    "content_hash, restatements, snapshot_id and generated_at."
    )
    restatements: Restatements
    snapshot_id: int
    generated_at: Instant
