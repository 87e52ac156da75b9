"""Excess log-loss: a closed period loses more than calibration explains, beyond the reference's excess.

The z test and its null variance are ``stats.window_tests.excess_log_loss_test``
(docs/methods.md §5.2-5.3); this kind adds the data floors and the effect
floor. Expected false alarms a year: level × evaluations a year × streams.
"""

from __future__ import annotations

from typing import Any

from pydantic import Field

from calibrant.alarms.kinds.base import (
    Decision,
    Granularity,
    Params,
    WindowInputs,
    WindowKind,
    whole,
    window_false_alarms_per_year,
)
from calibrant.stats.window_tests import LogLossSums, excess_log_loss_test


class ExcessLogLossParams(Params):
    granularity: Granularity = "week"
    level: float = Field(0.01, gt=0, lt=0.5)
    min_relative_effect: float = Field(0.05, ge=0, description="excess ≥ this × expected log-loss")
    min_labeled: int = Field(200, ge=20)
    min_per_class: int = Field(10, ge=1)


def describe(params: ExcessLogLossParams, *, streams: int, chart_streams: int) -> dict[str, Any]:
    per_year = window_false_alarms_per_year(params.level, params.granularity, streams)
    return {
        "detects": "excess log-loss (observed minus its expectation under calibration) of a closed, "
                   "mature period above the reference's; a changed case mix alone does not raise it",
        "minimum_data": f"{params.min_labeled} labeled predictions and {params.min_per_class} of "
                        "each class in the period",
        "false_alarms": {"per_year": per_year, "level": params.level, "scope": "rule",
                         "statement": f"one-sided test at level {params.level:g} once per "
                                      f"{params.granularity} on {streams} stream(s)"},
    }


def excess_log_loss(current: LogLossSums, reference: LogLossSums | None,
                    params: ExcessLogLossParams) -> Decision:
    """Cross when z > z_{1−α} and Δ ≥ min_relative_effect × E0[LL] (docs/methods.md §5.3).

    Δ = D − D_ref, D = (Σℓ − ΣH)/n the excess log-loss; without a labeled
    reference D_ref = 0 (the model is compared with perfect calibration). The
    raw log-loss difference is reported as context only: it moves with the case mix.
    """
    n0 = current.n - current.n1
    if current.n < params.min_labeled or min(current.n1, n0) < params.min_per_class:
        return Decision(None, None, whole(current.n),
                        f"too few cases: {current.n:g} labeled ({current.n1:g} events); needs "
                        f"{params.min_labeled} and {params.min_per_class} of each class")
    if current.sv <= 0:
        return Decision(None, None, whole(current.n), "null variance is 0 (every p is 0, ½ or 1)")
    test = excess_log_loss_test(current, reference, params.level)
    floor = params.min_relative_effect * test.expected_log_loss
    crossed = bool(test.z > test.z_critical and test.difference >= floor)
    ll_ref = test.reference_log_loss
    detail = {
        "excess_log_loss": test.excess, "reference_excess_log_loss": test.reference_excess, "z": test.z,
        "z_critical": test.z_critical, "p_value": test.p_value, "level": params.level,
        "expected_log_loss": test.expected_log_loss, "minimum_effect": floor, "log_loss": test.log_loss,
        "raw_log_loss_difference": None if ll_ref is None else test.log_loss - ll_ref,
        "reference": "labeled reference" if ll_ref is not None else "none: compared with calibration",
    }
    return Decision(crossed, test.difference, whole(current.n),
                    f"excess log-loss {test.excess:.4f} vs reference {test.reference_excess:.4f} "
                    f"(z = {test.z:.2f}, critical {test.z_critical:.2f}, minimum effect {floor:.4f})",
                    test.interval, detail)


def decide(params: ExcessLogLossParams, period: WindowInputs) -> Decision:
    return excess_log_loss(period.log_loss_sums(), period.reference_log_loss_sums(), params)


SPEC = WindowKind(params=ExcessLogLossParams, describe=describe, decide=decide)
