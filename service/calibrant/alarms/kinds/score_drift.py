"""Score drift: a closed period's score distribution moved from the reference, before outcomes can tell.

PSI on reference-decile bins above both its no-shift point at the rule's level
(``stats.window_tests.psi_no_shift_level``, docs/methods.md §17.2) and an
effect floor.
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
from calibrant.stats.result import Estimate
from calibrant.stats.window_tests import psi_no_shift_level


class DriftParams(Params):
    granularity: Granularity = "week"
    min_psi: float = Field(0.1, ge=0, description="effect floor (0.1: common practice, no published source)")
    min_predictions: int = Field(100, ge=10)
    budget_weight: float = Field(1.0, ge=MIN_BUDGET_WEIGHT, le=100,
                                 description="weight in the model's false-alarm budget")


def describe(params: DriftParams) -> dict[str, str]:
    return {
        "detects": "score distribution of a closed period shifted from the reference (PSI on "
                   "reference-decile bins above its no-shift point χ²(B−1)(1/n + 1/m) at the budget's "
                   f"level and above {params.min_psi:g}), before outcomes can tell",
        "minimum_data": f"{params.min_predictions} predictions in the period and a reference",
    }


def drift(est: Estimate, params: DriftParams, level: float) -> Decision:
    """PSI above max(χ²_{1−α,B−1}(1/n + 1/m), min_psi) (docs/methods.md §17.2 second-order law)."""
    n = float(est.n or 0.0)
    if est.value is None or not est.measured:
        return Decision(None, None, whole(n), f"PSI not available: {est.reason}")
    edges = str(est.extra.get("edges", ""))
    n_bins = int(est.extra.get("n_bins") or 2)
    n_ref = float(est.extra.get("n_reference") or 0.0)
    n_cur = float(est.extra.get("n_current") or n)
    if n_cur < params.min_predictions or n_ref <= 0:
        return Decision(None, est.value, whole(n_cur), f"too few cases: {n_cur:g} predictions")
    null = psi_no_shift_level(level, n_bins, n_ref, n_cur)
    limit = max(null, params.min_psi)
    return Decision(bool(est.value > limit), est.value, whole(n_cur),
                    f"PSI {est.value:.4f} vs limit {limit:.4f} (no-shift point {null:.4f})", None,
                    {"null_level": null, "limit": limit, "n_bins": n_bins, "n_reference": whole(n_ref),
                     "level": level, "edges": edges})


def decide(params: DriftParams, period: WindowInputs, level: float) -> Decision:
    return drift(period.metric("psi"), params, level)


SPEC = WindowKind(params=DriftParams, describe=describe, decide=decide, in_budget=always)
