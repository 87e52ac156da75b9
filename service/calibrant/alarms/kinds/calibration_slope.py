"""Calibration slope: a closed period's slope is significantly away from 1 and beyond an effect floor,
and stays there when the period's most extreme logits are winsorised.

The plain slope (``calibration_slope``, docs/methods.md §9.2) is the reported
statistic. One extreme prediction (p = 1e-9 with the event, among a few hundred
calibrated cases) drags it far below 1 and shrinks its standard error, so a
test on it alone fires on that one case. The robust slope
(``calibration_slope_robust``: the same fit with the logits clipped to the
period's own 2.5th and 97.5th percentiles, docs/methods.md §9.6) is the check:
the rule fires only when both slopes say the same thing, each by its own test.
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
    always,
    whole,
)
from calibrant.stats.result import Estimate


class CalibrationSlopeParams(Params):
    granularity: Granularity = "week"
    lower: float = Field(0.8, gt=0, lt=1, description="effect floor below 1: alarm only for a slope under it")
    upper: float = Field(1.2, gt=1, description="effect floor above 1: alarm only for a slope over it")
    min_labeled: int = Field(200, ge=20)
    min_per_class: int = Field(10, ge=1)
    budget_weight: float = Field(1.0, ge=MIN_BUDGET_WEIGHT, le=100,
                                 description="weight in the model's false-alarm budget")

    @model_validator(mode="after")
    def _check(self) -> CalibrationSlopeParams:
        if self.min_per_class * 2 > self.min_labeled:
            raise ValueError("min_per_class of each class cannot exceed half of min_labeled")
        return self


def describe(params: CalibrationSlopeParams) -> dict[str, str]:
    return {
        "detects": f"a calibration slope of a closed, mature {params.granularity} outside "
                   f"[{params.lower:g}, {params.upper:g}] that a two-sided Wald test also tells from 1, "
                   "when the slope refitted with the period's extreme logits winsorised agrees "
                   "(outside the same bound, its own test rejecting 1)",
        "minimum_data": f"{params.min_labeled} labeled predictions and {params.min_per_class} of "
                        "each class in the period (the slope fit itself needs 20 of each)",
    }


def _wald(est: Estimate, z_critical: float) -> tuple[float, bool] | None:
    """(z of slope = 1, whether it rejects) or None without a value and standard error."""
    if est.value is None or not est.measured or est.se is None or est.se <= 0:
        return None
    z = (est.value - 1.0) / est.se
    return z, abs(z) > z_critical


def _side(value: float, params: CalibrationSlopeParams) -> str | None:
    if value < params.lower:
        return "below"
    if value > params.upper:
        return "above"
    return None


def calibration_slope_decision(
    plain: Estimate, robust: Estimate, *, n: float, n1: float, n_clipped: float,
    n_confident_errors: float, params: CalibrationSlopeParams, level: float,
) -> Decision:
    """Cross when all four hold, with z_c = z_{1−level/2} (two-sided normal quantile):

    (a) the plain slope's Wald test of β = 1 rejects: |β̂ − 1| / SE(β̂) > z_c;
    (b) β̂ lies outside [lower, upper];
    (c) the robust slope β̂_w lies outside the same bound on the same side;
    (d) β̂_w's own Wald test of β = 1 rejects at the same level.

    (d) is why one extreme case cannot fire the rule: that case moves β̂_w only
    as much as an ordinary tail case, but a few hundred cases give β̂_w a
    standard error near the effect floor's distance from 1 (about 0.2 at 300),
    so with (a) made true by the extreme case, β̂_w beyond the floor alone would
    fire about one such period in four; its test at ``level`` rarely rejects
    (docs/methods.md §9.6 gives the measured rates). Each test
    rejects a calibrated period with probability ``level``, so requiring both
    keeps the rule's false alarms within the level the budget gave it.
    ``lower`` and ``upper`` are effect floors (common practice), not tests.

    Too few cases (``min_labeled`` labeled, ``min_per_class`` of each class), a
    slope the fit could not give, or a plain crossing the robust fit cannot
    confirm: ``crossed`` None (an open alarm stays as it is).
    """
    n0 = n - n1
    if n < params.min_labeled or min(n1, n0) < params.min_per_class:
        return Decision(None, None, whole(n),
                        f"too few cases: {n:g} labeled ({n1:g} events); needs "
                        f"{params.min_labeled} and {params.min_per_class} of each class")
    z_c = float(norm.ppf(1.0 - level / 2.0))
    test = _wald(plain, z_c)
    if plain.value is None or test is None:
        return Decision(None, plain.value, whole(n), f"calibration slope not available: {plain.reason}")
    b = plain.value
    z, rejects = test
    side = _side(b, params)
    robust_test = _wald(robust, z_c)
    detail = {
        "level": level, "z": z, "z_critical": z_c, "p_value": float(2.0 * norm.sf(abs(z))),
        "lower": params.lower, "upper": params.upper, "side": side,
        "robust_slope": robust.value, "robust_interval": list(robust.ci) if robust.ci else None,
        "robust_z": None if robust_test is None else robust_test[0],
        "robust_reason": None if robust.measured else robust.reason,
        "clip": [robust.extra.get("clip_low"), robust.extra.get("clip_high")],
        "n_winsorised": whole(float(robust.extra.get("n_winsorised") or 0.0)),
        "n_clipped": whole(n_clipped), "n_confident_errors": whole(n_confident_errors),
    }
    text = (f"calibration slope {b:.3f} (z = {z:.2f} against 1, critical {z_c:.2f}; "
            f"bounds [{params.lower:g}, {params.upper:g}])")
    if not (rejects and side):
        return Decision(False, b, whole(n), text, plain.ci, detail)
    if robust.value is None or robust_test is None:
        return Decision(None, b, whole(n), f"{text}; the winsorised slope that would confirm it is not "
                        f"available: {robust.reason}", plain.ci, detail)
    confirmed = _side(robust.value, params) == side and robust_test[1]
    text += (f"; winsorised slope {robust.value:.3f} (z = {robust_test[0]:.2f}) "
             + ("agrees" if confirmed else "does not confirm it"))
    return Decision(bool(confirmed), b, whole(n), text, plain.ci, detail)


def decide(params: CalibrationSlopeParams, period: WindowInputs, level: float) -> Decision:
    sums = period.log_loss_sums()
    return calibration_slope_decision(
        period.metric("calibration_slope"), period.metric("calibration_slope_robust"),
        n=sums.n, n1=sums.n1, n_clipped=float(period.metric("n_clipped").value or 0.0),
        n_confident_errors=float(period.metric("n_confident_errors").value or 0.0),
        params=params, level=level)


SPEC = WindowKind(params=CalibrationSlopeParams, describe=describe, decide=decide, in_budget=always)
