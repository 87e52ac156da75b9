"""Metric threshold: a period's metric outside bounds, optionally only if a test also rejects a value.

Without ``interval_excludes`` the rule is an effect-size threshold a person
chose, with no test, so no false-alarm rate can be stated: it is outside the
model's budget. With it, each evaluation is also a two-sided Wald test of that
value, z = |value − v0| / SE, at the per-test level the budget gives the rule
(``alarms.budget``); it is inside.
"""

from __future__ import annotations

from pydantic import Field, model_validator
from scipy.stats import norm

from calibrant.alarms.kinds.base import (
    MIN_BUDGET_WEIGHT,
    Decision,
    Granularity,
    Params,
    WindowInputs,
    WindowKind,
    whole,
)
from calibrant.stats.result import Estimate
from calibrant.vocabulary.metrics import COUNT_KEYS, INTERVAL_KEYS, LABEL_FREE_KEYS, METRIC_KEYS

REPORTED_INTERVAL_LEVEL = 0.05  # the metrics API reports 95 % intervals


class ThresholdParams(Params):
    metric: str
    lower: float | None = None
    upper: float | None = None
    interval_excludes: float | None = Field(
        None, description="alarm only when a two-sided test at the budget's level also rejects this value"
    )
    budget_weight: float = Field(1.0, ge=MIN_BUDGET_WEIGHT, le=100,
                                 description="weight in the model's false-alarm budget "
                                 "(only with interval_excludes: bounds alone are outside the budget)")
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


def describe(params: ThresholdParams) -> dict[str, str]:
    bounds = f"[{params.lower}, {params.upper}]"
    test = ("" if params.interval_excludes is None else
            f", when a two-sided Wald test also rejects {params.metric} = {params.interval_excludes:g}")
    return {
        "detects": f"{params.metric} of a closed, mature {params.granularity} outside {bounds}{test}",
        "minimum_data": f"{params.min_n} " + ("predictions" if params.metric in LABEL_FREE_KEYS
                                                else "labeled predictions") + " in the period",
    }


def in_budget(params: ThresholdParams) -> bool:
    """Only with ``interval_excludes`` is the rule a test; bounds alone are a person's choice."""
    return params.interval_excludes is not None


def _se(est: Estimate) -> float | None:
    """The estimate's standard error, else its 95 % interval's half-width / z_0.975 (symmetric reading)."""
    if est.se is not None and est.se > 0:
        return est.se
    if est.ci is not None and est.ci[1] > est.ci[0]:
        return (est.ci[1] - est.ci[0]) / (2.0 * float(norm.ppf(1.0 - REPORTED_INTERVAL_LEVEL / 2)))
    return None


def threshold(est: Estimate, params: ThresholdParams, level: float) -> Decision:
    """Value outside [lower, upper] and, if asked, |value − v0| / SE > z_{1−α/2} at the budget's α."""
    n = float(est.n or 0.0)
    if est.value is None or not est.measured:
        return Decision(None, None, whole(n), f"{params.metric} not available: {est.reason}")
    if n < params.min_n:
        return Decision(None, est.value, whole(n), f"too few cases: n = {n:g} < {params.min_n}")
    v = est.value
    below = params.lower is not None and v < params.lower
    outside = below or (params.upper is not None and v > params.upper)
    excluded = True
    z = None
    if params.interval_excludes is not None:
        se = _se(est)
        if se is None:
            return Decision(None, v, whole(n), f"{params.metric} has no standard error in this period")
        z = abs(v - params.interval_excludes) / se
        excluded = z > float(norm.ppf(1.0 - level / 2))
    crossed = bool(outside and excluded)
    return Decision(crossed, v, whole(n),
                    f"{params.metric} = {v:.4g}, bounds [{params.lower}, {params.upper}]", est.ci,
                    {"metric": params.metric, "lower": params.lower, "upper": params.upper,
                     "interval_excludes": params.interval_excludes, "z": z,
                     "level": level if params.interval_excludes is not None else None})


def decide(params: ThresholdParams, period: WindowInputs, level: float) -> Decision:
    return threshold(period.metric(params.metric), params, level)


SPEC = WindowKind(params=ThresholdParams, describe=describe, decide=decide, in_budget=in_budget)
