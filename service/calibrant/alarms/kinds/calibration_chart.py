"""Calibration chart: a risk-adjusted Bernoulli CUSUM (Steiner et al. 2000) on one side, per stream.

The chart itself, its limit design and the false-alarm budget across charts
are in ``stats.cusum`` and ``stats.cusum_design`` (docs/methods.md §18);
``alarms.charts`` routes cases to streams and keeps their state.
"""

from __future__ import annotations

import numpy as np
from pydantic import Field, model_validator

from calibrant.alarms.kinds.base import MIN_BUDGET_WEIGHT, ChartKind, Params, always
from calibrant.stats.cusum import UPPER_ODDS_RATIO, CusumState, CusumStep, advance
from calibrant.stats.cusum_design import RECOMMENDED_MIN_RISKS


class ChartParams(Params):
    """Risk-adjusted Bernoulli CUSUM (Steiner et al. 2000) on one side."""

    odds_ratio: float = Field(
        UPPER_ODDS_RATIO, gt=0, description="R_A: 2 watches for more events, ½ for fewer"
    )
    budget_weight: float = Field(
        2.0, ge=MIN_BUDGET_WEIGHT, le=100, description="this rule's weight in the model's false-alarm budget"
    )
    min_design_cases: int = Field(RECOMMENDED_MIN_RISKS, ge=200, le=100_000)
    design_sample: int = Field(5000, ge=200, le=100_000)
    # Redesign when the volume or the case mix moves this much (common practice, ours).
    redesign_rate_ratio: float = Field(1.5, gt=1)
    redesign_mean_change: float = Field(0.2, gt=0)

    @model_validator(mode="after")
    def _check(self) -> ChartParams:
        if self.odds_ratio == 1.0:
            raise ValueError("odds_ratio must differ from 1")
        if self.design_sample < self.min_design_cases:
            raise ValueError("design_sample must be at least min_design_cases")
        return self


def describe(params: ChartParams) -> dict[str, str]:
    side = "more" if params.odds_ratio > 1 else "fewer"
    return {
        "detects": f"{side} events than predicted: the odds of every case multiplied by "
                   f"{params.odds_ratio:g} (risk-adjusted Bernoulli CUSUM), per version and segment",
        "minimum_data": f"{params.min_design_cases} mature outcomes per stream before its limit is "
                        "designed; the chart starts after that",
    }


def decide(state: CusumState, p: np.ndarray, y: np.ndarray) -> CusumStep:
    """S_t = max(0, S_{t−1} + W_t) over the cases in order; a signal at the first S_t > h (§18.1)."""
    return advance(state, p, y, return_path=True)


SPEC = ChartKind(params=ChartParams, describe=describe, decide=decide, in_budget=always)
