"""A model's monitoring plan: what it is for, what counts as acceptable, who hears when it is not.

The plan is a document kept in versions (``plan_versions``): every PUT replaces it whole
and is kept, with who and when, and audited. Tolerances name a metric, its acceptable
bounds and the rule that watches it; the plan refers to rules by name (a rule's identifier
in the API), it never creates them, and a tolerance naming a rule the model lacks is refused.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from calibrant.store.history_tables import PlanVersion
from calibrant.vocabulary.metrics import MetricKey

ReviewCadence = Literal["weekly", "monthly", "quarterly", "half_yearly", "yearly"]


class Tolerance(BaseModel):
    """The acceptable range of one metric over a report's period, and the rule watching it."""

    model_config = ConfigDict(extra="forbid")

    metric: MetricKey
    lower: float | None = Field(None, description="Smallest acceptable value; none if unbounded below.")
    upper: float | None = Field(None, description="Largest acceptable value; none if unbounded above.")
    rule: str = Field(..., min_length=1, max_length=64, description="Name of the rule that watches it.")

    @model_validator(mode="after")
    def _bounded(self) -> Tolerance:
        if self.lower is None and self.upper is None:
            raise ValueError("give lower, upper or both")
        if self.lower is not None and self.upper is not None and self.lower > self.upper:
            raise ValueError("lower must not exceed upper")
        return self


class MonitoringPlan(BaseModel):
    """``PUT /v1/models/{model}/plan`` body: the whole plan (a new version replaces the last)."""

    model_config = ConfigDict(extra="forbid")

    owner: str = Field(..., min_length=1, max_length=200, description="Who answers for the model.")
    intended_use: str = Field(..., min_length=1, max_length=4000)
    outcome_definition: str = Field(..., min_length=1, max_length=2000,
                                    description="What label 1 means, and when it is known.")
    horizon_days: int | None = Field(None, ge=1, le=3650,
                                     description="Days after scoring within which the outcome counts.")
    tolerances: list[Tolerance] = Field(default_factory=list, max_length=50)
    review_cadence: ReviewCadence
    escalation_contact: str = Field(..., min_length=1, max_length=200)


def plan_out(row: PlanVersion, model_name: str) -> dict[str, Any]:
    return {"model": model_name, "version": row.version, "recorded_at": row.recorded_at,
            "recorded_by": row.actor, **row.content}
