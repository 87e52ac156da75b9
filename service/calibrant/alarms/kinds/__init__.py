"""The registry of rule kinds: each kind's name, and its module's spec; the default rules of a model.

A kind lives in one module of this package (its parameters, what it says
about itself, its decision) and is named here once. Everything else (the
evaluations, the rule use cases, backtests, the API) finds a kind through
``spec``; adding a kind touches its module and this registry only.

Every rule that makes a statistical test shares the model's one false-alarm
budget (``alarms.budget``); the weights of the default rules below are the
kinds' defaults (``budget_weight``).
"""

from __future__ import annotations

from enum import StrEnum
from typing import Any, Literal, get_args

from calibrant.alarms.kinds import (
    calibration_chart,
    calibration_slope,
    excess_log_loss,
    metric_threshold,
    score_drift,
    starvation,
)
from calibrant.alarms.kinds.base import Evaluation, KindSpec, Params
from calibrant.stats.cusum import LOWER_ODDS_RATIO, UPPER_ODDS_RATIO


class Kind(StrEnum):
    CHART = "calibration_chart"
    EXCESS_LOG_LOSS = "excess_log_loss"
    SLOPE = "calibration_slope"
    THRESHOLD = "metric_threshold"
    DRIFT = "score_drift"
    STARVATION = "starvation"


# The values of Kind as a type, for schemas; importing fails if the two ever list different names.
KindName = Literal[
    "calibration_chart", "excess_log_loss", "calibration_slope", "metric_threshold", "score_drift",
    "starvation",
]
if tuple(k.value for k in Kind) != get_args(KindName):
    raise RuntimeError("calibrant.alarms.kinds: KindName and Kind list different names")


KINDS: dict[Kind, KindSpec] = {
    Kind.CHART: calibration_chart.SPEC,
    Kind.EXCESS_LOG_LOSS: excess_log_loss.SPEC,
    Kind.SLOPE: calibration_slope.SPEC,
    Kind.THRESHOLD: metric_threshold.SPEC,
    Kind.DRIFT: score_drift.SPEC,
    Kind.STARVATION: starvation.SPEC,
}

DEFAULT_RULES: tuple[tuple[str, Kind, dict[str, Any]], ...] = (
    ("calibration-chart-upper", Kind.CHART, {"odds_ratio": UPPER_ODDS_RATIO}),
    ("calibration-chart-lower", Kind.CHART, {"odds_ratio": LOWER_ODDS_RATIO}),
    ("excess-log-loss-weekly", Kind.EXCESS_LOG_LOSS, {}),
    ("calibration-slope-weekly", Kind.SLOPE, {}),
    ("score-drift-weekly", Kind.DRIFT, {}),
    ("feed-starvation", Kind.STARVATION, {}),
)


def spec(kind: str) -> KindSpec:
    """The spec of a kind by its name; ``ValueError`` for a name that is not a kind."""
    return KINDS[Kind(kind)]


def parse_params(kind: str, params: dict[str, Any]) -> Params:
    """A rule's stored or posted parameters, validated by its kind (pydantic ``ValidationError``)."""
    return spec(kind).params.model_validate(params)


def evaluated_as(kind: str, evaluation: Evaluation) -> bool:
    """Whether the kind named ``kind`` is judged as a chart, per window or on the feeds."""
    return spec(kind).evaluation == evaluation
