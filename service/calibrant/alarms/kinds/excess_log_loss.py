"""Excess log-loss: a closed period loses more than calibration explains, beyond the reference's excess.

The test and its null distribution are ``stats.window_tests.excess_log_loss_test``
(docs/methods.md §5.2-5.3): a saddlepoint tail of Δ = D − D_ref under
calibration, at the per-test level the model's false-alarm budget passes in.
This kind adds the data floors and the effect floor.
"""

from __future__ import annotations

from pydantic import Field

from calibrant.alarms.kinds.base import (
    MIN_BUDGET_WEIGHT,
    Decision,
    Granularity,
    Params,
    WindowInputs,
    WindowKind,
    always,
    whole,
)
from calibrant.stats.window_tests import LogLossSums, excess_log_loss_test


class ExcessLogLossParams(Params):
    granularity: Granularity = "week"
    min_relative_effect: float = Field(0.05, ge=0, description="excess ≥ this × expected log-loss")
    min_labeled: int = Field(200, ge=20)
    min_per_class: int = Field(10, ge=1)
    budget_weight: float = Field(2.0, ge=MIN_BUDGET_WEIGHT, le=100,
                                 description="weight in the model's false-alarm budget")


def describe(params: ExcessLogLossParams) -> dict[str, str]:
    """What the rule sees. Its expected excess per row is (p − q)·logit(p), q the true risk
    (docs/methods.md §5.2), which gives each sentence below."""
    return {
        "detects": "excess log-loss (observed log-loss minus its expectation under calibration) of a "
                   "closed, mature period above the reference's, one-sided. Each case adds (p − q)·logit(p) "
                   "in expectation, q its true risk: predictions too extreme (events more frequent than "
                   "predicted where p < ½, rarer where p > ½) raise it; predictions too timid, or events "
                   "rarer than predicted where p < ½, lower it and are not flagged. A changed case mix does "
                   "not raise it while the model stays calibrated; it can when the mix moves toward cases "
                   "the model is miscalibrated on, since the period is compared with the reference. A "
                   "shift of every case's odds by one factor moves it only at second order when the risks "
                   "lie symmetric around p = ½ (the rises below ½ and the falls above cancel), so such a "
                   "shift is nearly invisible to it",
        "minimum_data": f"{params.min_labeled} labeled predictions and {params.min_per_class} of "
                        "each class in the period",
    }


def excess_log_loss(current: LogLossSums, reference: LogLossSums | None,
                    params: ExcessLogLossParams, level: float) -> Decision:
    """Cross when P(Δ ≥ δ_obs) ≤ level under calibration and Δ ≥ min_relative_effect × E0[LL].

    Δ = D − D_ref, D = (Σℓ − ΣH)/n the excess log-loss; without a labeled
    reference D_ref = 0 (the model is compared with perfect calibration). The
    p-value is the saddlepoint tail (docs/methods.md §5.3); z, its normal
    critical value and the raw log-loss difference are reported as context only
    (the normal tail is too thin for rare events; the raw difference moves with
    the case mix).
    """
    n0 = current.n - current.n1
    if current.n < params.min_labeled or min(current.n1, n0) < params.min_per_class:
        return Decision(None, None, whole(current.n),
                        f"too few cases: {current.n:g} labeled ({current.n1:g} events); needs "
                        f"{params.min_labeled} and {params.min_per_class} of each class")
    if current.sv <= 0:
        return Decision(None, None, whole(current.n), "null variance is 0 (every p is 0, ½ or 1)")
    test = excess_log_loss_test(current, reference, level)
    floor = params.min_relative_effect * test.expected_log_loss
    crossed = bool(test.significant and test.difference >= floor)
    ll_ref = test.reference_log_loss
    detail = {
        "excess_log_loss": test.excess, "reference_excess_log_loss": test.reference_excess,
        "p_value": test.p_value, "tail": test.tail, "level": level, "z": test.z,
        "z_critical": test.z_critical, "expected_log_loss": test.expected_log_loss,
        "minimum_effect": floor, "log_loss": test.log_loss,
        "raw_log_loss_difference": None if ll_ref is None else test.log_loss - ll_ref,
        "reference": "labeled reference" if ll_ref is not None else "none: compared with calibration",
    }
    return Decision(crossed, test.difference, whole(current.n),
                    f"excess log-loss {test.excess:.4f} vs reference {test.reference_excess:.4f} "
                    f"(p = {test.p_value:.2g} at level {level:.2g}, {test.tail} tail; z = {test.z:.2f}; "
                    f"minimum effect {floor:.4f})",
                    test.interval, detail)


def decide(params: ExcessLogLossParams, period: WindowInputs, level: float) -> Decision:
    return excess_log_loss(period.log_loss_sums(), period.reference_log_loss_sums(), params, level)


SPEC = WindowKind(params=ExcessLogLossParams, describe=describe, decide=decide, in_budget=always)
