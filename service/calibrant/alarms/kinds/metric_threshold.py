"""Metric threshold: a period's metric outside bounds, optionally only if its 95 % interval excludes a value.

Without ``interval_excludes`` the rule is an effect-size threshold with no
test, so no false-alarm rate can be stated; with it, each evaluation is a
5 % two-sided test of that value.
"""

from __future__ import annotations

from typing import Any

from pydantic import Field, model_validator

from calibrant.alarms.kinds.base import (
    Decision,
    Granularity,
    Params,
    WindowInputs,
    WindowKind,
    whole,
    window_false_alarms_per_year,
)
from calibrant.stats.result import Estimate
from calibrant.vocabulary.metrics import COUNT_KEYS, INTERVAL_KEYS, LABEL_FREE_KEYS, METRIC_KEYS

INTERVAL_LEVEL = 0.05  # the metrics API reports 95 % intervals


class ThresholdParams(Params):
    metric: str
    lower: float | None = None
    upper: float | None = None
    interval_excludes: float | None = Field(
        None, description="alarm only when the 95 % interval also excludes this value"
    )
    min_n: int = Field(100, ge=1)
    granularity: Granularity = "week"

    @model_validator(mode="after")
    def _check(self) -> ThresholdParams:
        if self.metric not in (*COUNT_KEYS, *METRIC_KEYS):
            raise ValueError(f"metric must be a metrics-API key: {', '.join((*COUNT_KEYS, *METRIC_KEYS))}")
        if self.lower is None and self.upper is None:
            raise ValueError("give lower, upper or both")
        if self.lower is not None and self.upper is not None and self.lower >= self.upper:
            raise ValueError("lower must be below upper")
        if self.interval_excludes is not None and self.metric not in INTERVAL_KEYS:
            raise ValueError(
                f"{self.metric} has no interval; interval_excludes needs one of {INTERVAL_KEYS}"
            )
        return self


def describe(params: ThresholdParams, *, streams: int, chart_streams: int) -> dict[str, Any]:
    bounds = f"[{params.lower}, {params.upper}]"
    rate: dict[str, Any]
    if params.interval_excludes is not None:
        per_year = window_false_alarms_per_year(INTERVAL_LEVEL, params.granularity, streams)
        rate = {"per_year": per_year, "level": INTERVAL_LEVEL, "scope": "rule",
                "statement": f"at most 5 % per evaluation when the true {params.metric} is "
                             f"{params.interval_excludes:g} (the 95 % interval must exclude it), "
                             "once per "
                             f"{params.granularity} on {streams} stream(s)"}
    else:
        rate = {"per_year": None, "level": None, "scope": "rule",
                "statement": "an effect-size threshold without a test: no false-alarm rate can be "
                             "stated; set interval_excludes to get one"}
    return {
        "detects": f"{params.metric} of a closed, mature {params.granularity} outside {bounds}",
        "minimum_data": f"{params.min_n} " + ("predictions" if params.metric in LABEL_FREE_KEYS
                                                else "labeled predictions") + " in the period",
        "false_alarms": rate,
    }


def threshold(est: Estimate, params: ThresholdParams) -> Decision:
    """Value outside [lower, upper] (and, if asked, its 95 % interval excluding a value)."""
    n = float(est.n or 0.0)
    if est.value is None or not est.measured:
        return Decision(None, None, whole(n), f"{params.metric} not available: {est.reason}")
    if n < params.min_n:
        return Decision(None, est.value, whole(n), f"too few cases: n = {n:g} < {params.min_n}")
    v = est.value
    below = params.lower is not None and v < params.lower
    outside = below or (params.upper is not None and v > params.upper)
    excluded = True
    if params.interval_excludes is not None:
        if est.ci is None:
            return Decision(None, v, whole(n), f"{params.metric} has no interval in this period")
        excluded = not (est.ci[0] <= params.interval_excludes <= est.ci[1])
    crossed = bool(outside and excluded)
    return Decision(crossed, v, whole(n),
                    f"{params.metric} = {v:.4g}, bounds [{params.lower}, {params.upper}]", est.ci,
                    {"metric": params.metric, "lower": params.lower, "upper": params.upper,
                     "interval_excludes": params.interval_excludes})


def decide(params: ThresholdParams, period: WindowInputs) -> Decision:
    return threshold(period.metric(params.metric), params)


SPEC = WindowKind(params=ThresholdParams, describe=describe, decide=decide)
