"""A model's monitoring settings: validation and merge-update."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from pydantic import (
    AwareDatetime,
    BaseModel,
    ConfigDict,
    Field,
    StringConstraints,
    field_validator,
    model_validator,
)

from calibrant.vocabulary.instants import QUERY_EARLIEST, QUERY_LATEST
from calibrant.vocabulary.segments import TAG_KEY_PATTERN

MAX_SEGMENT_KEYS = 4
# Anchored (TAG_KEY_PATTERN has ^ and $): a pydantic pattern matches anywhere in the string otherwise.
SegmentKey = Annotated[str, StringConstraints(pattern=TAG_KEY_PATTERN)]


class TrafficReference(BaseModel):
    """Use the model's own predictions scored in [start, end) as the reference."""

    model_config = ConfigDict(extra="forbid")

    kind: Literal["traffic"] = "traffic"
    start: AwareDatetime
    end: AwareDatetime
    version: str | None = Field(None, description="Restrict to one version; all versions if absent.")

    @field_validator("start", "end")
    @classmethod
    def _in_query_years(cls, value: datetime) -> datetime:
        # The reference range is queried like a metrics range: the same years keep its date
        # arithmetic away from the ends of the calendar.
        if not QUERY_EARLIEST <= value < QUERY_LATEST:
            raise ValueError("must lie in the years 1900 to 2999")
        return value

    @model_validator(mode="after")
    def _ordered(self) -> TrafficReference:
        if self.end <= self.start:
            raise ValueError("end must be after start")
        return self


class ModelSettingsPatch(BaseModel):
    """``PUT /v1/models/{model}`` body. Absent fields keep their value (merge)."""

    model_config = ConfigDict(extra="forbid")

    description: str | None = Field(None, max_length=2000)
    outcome_horizon_days: int | None = Field(
        None, ge=1, le=3650, description="Days after scoring within which the event counts."
    )
    outcome_lag_days: int | None = Field(
        None, ge=0, le=3650, description="Extra days for outcomes to be reported."
    )
    implicit_negatives: bool | None = Field(
        None, description="Count a mature prediction without outcome as 0 (needs a horizon)."
    )
    segment_keys: list[SegmentKey] | None = Field(
        None, max_length=MAX_SEGMENT_KEYS, description="Tag keys to keep summaries for (<= 4)."
    )
    reference: TrafficReference | None = None
    false_alarms_per_year: float | None = Field(
        None, ge=0.001, le=365,
        description="Expected false alarms a year of all the model's rules together, when it is "
                    "well calibrated and its feeds are healthy (default 1).",
    )
    retention_days: int | None = Field(
        None, ge=1, le=36_500,
        description="Days raw predictions and outcomes are kept, counted from scoring; older ones are "
                    "removed by the retention job while their summaries stay. Null keeps them for ever. "
                    "With a horizon it must be at least horizon + lag.",
    )

    # A field validator (not a model validator) so the 422 names segment_keys, not the body.
    @field_validator("segment_keys")
    @classmethod
    def _unique_keys(cls, keys: list[str] | None) -> list[str] | None:
        if keys is not None and len(set(keys)) != len(keys):
            raise ValueError("segment_keys must not repeat")
        return keys


# Settings whose change invalidates the model's summaries.
SUMMARY_SETTINGS = ("outcome_horizon_days", "outcome_lag_days", "implicit_negatives", "segment_keys")


def merged(current: dict[str, Any], patch: ModelSettingsPatch, fields_set: set[str]) -> dict[str, Any]:
    """The settings after applying the fields the client actually sent.

    ``fields_set`` distinguishes "absent" (keep) from an explicit null, which
    clears ``outcome_horizon_days`` or ``reference``.
    """
    out = dict(current)
    for name in fields_set:
        value = getattr(patch, name)
        if name == "reference" and value is not None:
            value = value.model_dump(mode="json")
        if value is None and name in {"description", "outcome_lag_days", "implicit_negatives",
                                      "false_alarms_per_year"}:
            value = {"description": "", "outcome_lag_days": 0, "implicit_negatives": False,
                     "false_alarms_per_year": 1.0}[name]
        if value is None and name == "segment_keys":
            value = []
        out[name] = value
    return out


def consistency_problem(settings: dict[str, Any]) -> tuple[str, str] | None:
    """(field, why) when the settings contradict each other; None when they agree."""
    if settings.get("implicit_negatives") and settings.get("outcome_horizon_days") is None:
        return ("implicit_negatives",
                "implicit_negatives needs outcome_horizon_days: without a horizon no case is ever mature")
    retention, horizon = settings.get("retention_days"), settings.get("outcome_horizon_days")
    if retention is not None and horizon is not None:
        needed = horizon + (settings.get("outcome_lag_days") or 0)
        if retention < needed:
            # A case removed before its outcome may arrive would never be labelled.
            why = (f"retention_days must be at least outcome_horizon_days + outcome_lag_days ({needed}): "
                   "raw rows removed before their outcomes arrive would never be labelled")
            return ("retention_days", why)
    return None

