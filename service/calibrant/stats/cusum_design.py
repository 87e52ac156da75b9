"""Choosing the CUSUM control limit h for a target in-control ARL.

The in-control run length of a risk-adjusted CUSUM depends on the stream's
mix of predicted risks, so h is designed from a sample of the stream's recent
mature risks, taken as an empirical distribution resampled i.i.d. (docs/methods.md
§18). The average run length comes from the Markov-chain approximation of
Brook & Evans (1972) (``cusum_markov``): the linear scheme at m and 2m states,
Richardson-extrapolated, and h is the root of ln ARL0(h) = ln target.

Minimum data: the designer needs at least one risk and raises ValueError for
an empty sample. That is a mathematical floor only; as common practice use a
few thousand recent mature cases (``RECOMMENDED_MIN_RISKS``, docs/methods.md
§18), because the tails of the risk mix
drive h. Redesign when the mix moves.

References
----------
.. [1] Steiner SH, Cook RJ, Farewell VT, Treasure T (2000). Monitoring surgical
   performance using risk-adjusted cumulative sum charts. Biostatistics
   1(4):441–452. doi:10.1093/biostatistics/1.4.441
.. [2] Brook D, Evans DA (1972). An approach to the probability distribution
   of CUSUM run length. Biometrika 59(3):539–549. doi:10.1093/biomet/59.3.539
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy.optimize import brentq

from calibrant.stats.cusum import UPPER_ODDS_RATIO, _check_risks
from calibrant.stats.cusum_markov import (
    DEFAULT_POINTS,
    IncrementMix,
    increment_mix,
    markov_arl,
    refined_markov_arl,
)

__all__ = [
    "DESIGN_METHOD",
    "RECOMMENDED_MIN_RISKS",
    "CusumDesign",
    "RiskSummary",
    "arl0_for_false_alarm_budget",
    "design_cusum",
    "out_of_control_arl",
    "summarise_risks",
]

RECOMMENDED_MIN_RISKS = 2000  # common practice, see the module docstring
DEFAULT_STATES = 400
DESIGN_METHOD = "markov_chain_linear_states_richardson"
DAYS_PER_YEAR = 365.25
_H_TOLERANCE = 1e-5  # h is reported to 4 decimals
_H_FLOOR = 1e-3  # smallest limit tried; below it the chart signals on almost any event
_H_CEILING = 200.0  # ARLs there exceed anything the chain resolves

_EPS = float(np.finfo(np.float64).eps)
_QUANTILES = (0.01, 0.10, 0.50, 0.90, 0.99)


@dataclass(frozen=True, slots=True)
class RiskSummary:
    """The risk mix a design was made for (risks clipped to [ε, 1 − ε])."""

    n: int
    mean: float
    q01: float
    q10: float
    q50: float
    q90: float
    q99: float


@dataclass(frozen=True, slots=True)
class CusumDesign:
    """A control limit and everything needed to judge it later.

    ``achieved_arl0`` is the extrapolated Markov ARL0 at ``h``;
    ``arl0_coarse`` and ``arl0_fine`` are the chain's values at ``n_states``
    and twice that many states, whose relative difference
    (``discretisation_change``) is the accuracy check. ``n_risk_points`` is
    the number of representative risks after compression.
    """

    h: float
    r_a: float
    target_arl0: float
    achieved_arl0: float
    arl0_coarse: float
    arl0_fine: float
    n_states: int
    n_risks: int
    n_risk_points: int
    risks: RiskSummary
    method: str = DESIGN_METHOD

    @property
    def discretisation_change(self) -> float:
        return abs(self.arl0_fine / self.arl0_coarse - 1.0)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-able dict, to store beside each alarm."""
        return asdict(self)


def summarise_risks(risks: ArrayLike) -> RiskSummary:
    """Mean and 1/10/50/90/99 % quantiles of a non-empty risk sample."""
    p = np.clip(_check_risks(risks, "risks"), _EPS, 1.0 - _EPS)
    if p.shape[0] == 0:
        raise ValueError("risks is empty: a chart can only be designed from a sample of risks")
    q = np.quantile(p, _QUANTILES)
    return RiskSummary(int(p.shape[0]), float(p.mean()), *(float(v) for v in q))


def _bracket_root(f: Callable[[float], float], lo: float, hi: float) -> tuple[float, float]:
    """Grow [lo, hi] upwards until f changes sign (f increases with h)."""
    while f(hi) < 0.0:
        if hi >= _H_CEILING:
            raise ValueError("no control limit below h = 200 reaches the target ARL0")
        lo, hi = hi, min(2.0 * hi, _H_CEILING)
    return lo, hi


def _log_gap(arl: float, target: float) -> float:
    return math.inf if math.isinf(arl) else math.log(arl) - math.log(target)


def design_cusum(
    risks: ArrayLike,
    target_arl0: float,
    r_a: float = UPPER_ODDS_RATIO,
    *,
    n_states: int = DEFAULT_STATES,
    max_points: int = DEFAULT_POINTS,
) -> CusumDesign:
    """Control limit h giving in-control ARL0 = ``target_arl0`` cases.

    Parameters
    ----------
    risks : array of shape (n,), n ≥ 1 (see the module docstring for how many)
        Recent mature predicted risks of the stream.
    target_arl0 : average number of in-control cases between false alarms.
    r_a : alternative odds ratio (2 for the upper chart, ½ for the lower).
    n_states : m; the chain is solved at m and 2m states.
    max_points : risk samples larger than this are compressed to this many
        logit bins (``cusum_markov.increment_mix``).

    Method
    ------
    1. Root of ln ARL0_m(h) = ln target at m states (cheap), h in
       [0.001, 200].
    2. Root of the Richardson-extrapolated ln ARL0 (m and 2m states) near it.
    ARL0 grows roughly like e^h (the weights are a log-likelihood ratio), so
    ln ARL0 is close to linear in h and both roots converge in a few steps.

    Raises
    ------
    ValueError
        Empty or invalid risks; target ≤ 1; a target below what any h > 0
        allows (with R_A > 1 the chart signals at the first event once
        h < ln R_A, so ARL0 cannot fall much below 1/mean risk).
    """
    target = float(target_arl0)
    if not (math.isfinite(target) and target > 1.0):
        raise ValueError(f"target_arl0 must be a finite number of cases above 1, got {target!r}")
    summary = summarise_risks(risks)
    mix = increment_mix(risks, r_a, 1.0, max_points)

    def coarse_gap(h: float) -> float:
        return _log_gap(markov_arl(h, mix, n_states), target)

    def refined_gap(h: float) -> float:
        return _log_gap(refined_markov_arl(h, mix, n_states).value, target)

    if coarse_gap(_H_FLOOR) >= 0.0:
        raise ValueError(
            f"target_arl0 = {target:g} is below the smallest in-control ARL this risk mix "
            f"allows ({markov_arl(_H_FLOOR, mix, n_states):.4g} cases at h = {_H_FLOOR})"
        )
    lo, hi = _bracket_root(coarse_gap, _H_FLOOR, max(1.0, math.log(target)))
    h_coarse = brentq(coarse_gap, lo, hi, xtol=_H_TOLERANCE)

    # Start the refined search from a Newton-like step with slope ≈ 1 in ln ARL.
    gap = refined_gap(h_coarse)
    width = max(2.0 * abs(gap), 1e-3) if math.isfinite(gap) else 0.5
    lo, hi = max(_H_FLOOR, h_coarse - width), h_coarse + width
    while refined_gap(lo) > 0.0 and lo > _H_FLOOR:
        lo = max(_H_FLOOR, lo - 2.0 * width)
    lo, hi = _bracket_root(refined_gap, lo, hi)
    h = brentq(refined_gap, lo, hi, xtol=_H_TOLERANCE)

    arl = refined_markov_arl(h, mix, n_states)
    return CusumDesign(
        h=float(h),
        r_a=mix.r_a,
        target_arl0=target,
        achieved_arl0=arl.value,
        arl0_coarse=arl.coarse,
        arl0_fine=arl.fine,
        n_states=int(n_states),
        n_risks=mix.n_risks,
        n_risk_points=int(mix.mass.shape[0]),
        risks=summary,
    )


def out_of_control_arl(
    h: float,
    risks: ArrayLike,
    r_a: float,
    odds_ratio: float,
    *,
    n_states: int = DEFAULT_STATES,
    max_points: int = DEFAULT_POINTS,
) -> float:
    """Zero-state ARL1 when the true odds are ``odds_ratio`` times the model's.

    Same chain as the design, with event probabilities q = OR p/(1 − p + OR p)
    while the chart's weights stay those of p; the shift is present from the
    first case. For Beta(2, 8) risks, h = 5.698, R_A = OR = 2 this is about
    117.5 cases (docs/methods.md §21). ``odds_ratio = 1`` gives ARL0.
    """
    mix: IncrementMix = increment_mix(risks, r_a, odds_ratio, max_points)
    return refined_markov_arl(float(h), mix, n_states).value


def arl0_for_false_alarm_budget(
    cases_per_day: float,
    n_charts: int,
    false_alarms_per_year: float = 1.0,
) -> float:
    """Per-chart ARL0 (in cases) that keeps K charts within a yearly false-alarm budget.

    ARL0_chart = K × cases per year / budget, with cases per year =
    ``cases_per_day`` × 365.25 and every chart fed by a stream of that rate.

    Why: a chart restarted after each alarm is a renewal process, so its
    long-run false-alarm rate is 1/ARL0 per case whatever the dependence
    between charts, and the rates of K charts add. For the *first* false
    alarm the run lengths are roughly geometric (docs/methods.md §18), and the time
    to the first of K roughly independent charts is about 1/Σ_k(1/ARL_k) =
    ARL0_chart/K — docs/methods.md §18's note on two charts on the same stream:
    simulated 4,962 cases for two charts of ARL0 ≈ 10,000 each. Charts on one
    stream are not independent, so this is an approximation (common
    practice).

    Example: upper and lower chart (K = 2) on a model scoring 1,000 cases a
    day, at most one false alarm a year: 2 × 365,250 / 1 = 730,500 cases.
    """
    rate = float(cases_per_day)
    budget = float(false_alarms_per_year)
    if not (math.isfinite(rate) and rate > 0.0):
        raise ValueError(f"cases_per_day must be positive, got {rate!r}")
    if not (math.isfinite(budget) and budget > 0.0):
        raise ValueError(f"false_alarms_per_year must be positive, got {budget!r}")
    if int(n_charts) != n_charts or n_charts < 1:
        raise ValueError(f"n_charts must be a positive integer, got {n_charts!r}")
    return int(n_charts) * rate * DAYS_PER_YEAR / budget
