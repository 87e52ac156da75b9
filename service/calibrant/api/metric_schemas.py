"""Response models of …/metrics, …/reliability and the uploaded reference.

The period model is built from the metric registry's key lists
(calibrant.vocabulary.metrics: ``COUNT_KEYS``, ``METRIC_KEYS``,
``INTERVAL_KEYS``), so a metric added there appears here with its field, its
``_ci`` field when it has an interval, and its status key.
"""

from __future__ import annotations

from typing import Any, ClassVar, Literal

from pydantic import BaseModel, Field, create_model

from calibrant.api.instant import Instant
from calibrant.api.schemas import UploadedReferenceOut
from calibrant.api.sparse import SparseModel
from calibrant.rollup.periods import GranularityName
from calibrant.stats.result import StatusName
from calibrant.vocabulary.metrics import (
    BY_KEY,
    COUNT_KEYS,
    INTERVAL_KEYS,
    METRIC_KEYS,
    NULL_LEVEL_KEYS,
    P_VALUE_KEYS,
    PeriodKey,
)

ESTIMAND = (
    "Each interval is for the period's population value: the expected value over cases drawn "
    "like the period's cases, with outcomes from the true outcome process (not a band under the "
    "assumption that the model is calibrated; docs/methods.md §20.2). Below a metric's floor "
    "there is no interval."
)


class MetricStatus(BaseModel):
    state: StatusName = Field(description=(
        "measured, too_few_cases or no_value. too_few_cases: the period is below the metric's "
        "floor (fewest events and non-events, docs/methods.md §20.1); it then has no interval, "
        "and the calibration slopes and AUC have no value."))
    reason: str = Field(description="Why there is no trustworthy value, in words one can act on; "
                                    "below a floor it names the floor and the period's counts.")


class NullLevel(BaseModel):
    """What the statistic reads when there is nothing to find, at this period's counts."""

    expected: float = Field(description="Value expected under calibration (ECE) or no drift (PSI).")
    upper_95: float = Field(description="95 % point of the statistic under that null: a measured value "
                                        "above it exceeds what noise alone gives 1 time in 20.")


class _PeriodBase(SparseModel):
    omitted_when_absent: ClassVar[frozenset[str]] = frozenset({"window_start"})

    start: Instant = Field(description="Start of the calendar period (inclusive).")
    end: Instant = Field(description="End of the calendar period (exclusive).")
    window_start: Instant | None = Field(
        None, description="Start of the trailing window the values describe; present only with `window`."
    )
    label_completeness: float | None = Field(
        None,
        description="Estimated share of the period's eventual outcomes already reported: the measured "
                    "delay distribution F at each case's age, averaged over the period's cases "
                    "(docs/methods.md §23). Not label_coverage, which counts labels over predictions. "
                    "Null when no delay is measured yet or the period has no predictions.",
    )
    provisional: bool = Field(
        False,
        description="True while label metrics may still move: completeness below 0.95, predictions "
                    "still inside horizon + lag, or (without a horizon) no delay measured yet.",
    )
    provisional_reason: str | None = Field(None, description="Why the period is provisional; null if not.")
    raw_rows_removed: bool = Field(
        False, description="Retention removed raw rows of this period: its figures come from the "
                           "summaries kept, and late rows for it are counted `expired` (docs/retention.md)."
    )
    computed_under_settings_of: Instant | None = Field(
        None, description="When part of the period was sealed by retention under settings that have "
                          "changed since: the instant whose settings (GET …/history?at=) its summaries "
                          "follow, the earliest if several. Null: the current settings apply throughout.",
    )


def _description(key: str) -> str:
    return BY_KEY[key].description


_NULL_DESCRIPTIONS = {
    "ece": ("ECE expected if the model were calibrated, at this period's bins and counts, and its "
            "95 % point (binomial counts per bin, gamma law for the sum; docs/methods.md §12.1); "
            "null when ece is not measured."),
    "psi": ("PSI expected without drift, (B − 1)(1/n + 1/m), and its 95 % point "
            "χ²_{0.95,B−1}(1/n + 1/m), n and m the period's and the reference's counts "
            "(docs/methods.md §17.2); null when psi is not measured."),
}


def _period_fields() -> dict[str, Any]:
    fields: dict[str, Any] = {}
    for count_key in COUNT_KEYS:
        fields[count_key] = (int, Field(description=_description(count_key)))
    for key in METRIC_KEYS:
        fields[key] = (float | None, Field(description=_description(key)))
        if key in INTERVAL_KEYS:
            fields[f"{key}_ci"] = (
                tuple[float, float] | None,
                Field(description=f"95 % interval [low, high] of {key}; null when there is none. "
                                  + ESTIMAND),
            )
        if key in P_VALUE_KEYS:
            fields[f"{key}_p_value"] = (
                float | None,
                Field(description=f"Two-sided p-value of {key} under calibration (normal law); "
                                  "null when the statistic is not measured."),
            )
        if key in NULL_LEVEL_KEYS:
            fields[f"{key}_null"] = (
                NullLevel | None,
                Field(description=_NULL_DESCRIPTIONS[key]),
            )
    fields["status"] = (
        dict[PeriodKey, MetricStatus],
        Field(description="For each metric without a measured value: its state and the reason."),
    )
    return fields


MetricPeriod = create_model(
    "MetricPeriod",
    __base__=_PeriodBase,
    __doc__="One calendar period: its counts, every metric, their intervals and statuses.",
    **_period_fields(),
)


class MetricsOut(BaseModel):
    model: str
    granularity: GranularityName
    version: str | None = Field(description="The version asked for; null: all versions pooled.")
    tag: str | None = Field(description="The segment filter key:value asked for; null: every case.")
    refreshed_at: Instant | None = Field(description="When summaries were last refreshed; null: never.")
    periods: list[MetricPeriod] = Field(description="Oldest first.")


class ReliabilityBin(BaseModel):
    lower: float = Field(description="Lower edge of the bin.")
    upper: float = Field(description="Upper edge of the bin.")
    count: int = Field(description="Labeled predictions in the bin.")
    mean_predicted: float | None = Field(description="Mean probability in the bin; null when empty.")
    observed_rate: float | None = Field(description="Share with the event; null when empty.")
    observed_rate_ci: tuple[float, float] | None = Field(
        description="Wilson 95 % interval of the observed rate; null when empty."
    )


class ReliabilityOut(BaseModel):
    model: str
    start: Instant
    end: Instant
    strategy: Literal["uniform", "quantile"]
    refreshed_at: Instant | None
    n: int = Field(description="Mature labeled predictions in the diagram.")
    closed: Literal["right", "left"] = Field(description="Which edge of a bin belongs to it.")
    interval: str = Field(description="The interval method of observed_rate_ci.")
    status: MetricStatus
    bins: list[ReliabilityBin]
    ece: float | None = Field(description="ECE over these bins; null below its floor (5 events and "
                                          "5 non-events) or when there are no cases.")
    ece_null: NullLevel | None = Field(description=_NULL_DESCRIPTIONS["ece"])
    spiegelhalter_z: float | None = Field(description="Spiegelhalter's z over the diagram's cases; "
                                                      "null below its floor (5 events and 5 non-events).")
    spiegelhalter_z_p_value: float | None = Field(
        description="Two-sided normal p-value of spiegelhalter_z under calibration.")


class ReferenceUploadOut(BaseModel):
    model: str
    reference: UploadedReferenceOut
