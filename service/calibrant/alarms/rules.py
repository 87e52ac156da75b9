"""Rule kinds, their parameters and defaults, what each says about itself, and pure decisions.

Nothing here touches the database. A *window* rule (excess log-loss, metric
threshold, score drift) is judged once per closed, mature calendar period; a
*chart* rule consumes mature cases one at a time (``charts``); starvation looks
at the feeds at every evaluation.

Expected false alarms per year of a window rule, stated in the API, is
level × evaluations per year × streams (versions × segments): each period's
test is made once, at its stated level, on each stream (docs/architecture.md, alarms).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import StrEnum
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator
from scipy import stats

from calibrant.rollup.query import COUNT_KEYS, METRIC_KEYS
from calibrant.stats.cusum import LOWER_ODDS_RATIO, UPPER_ODDS_RATIO
from calibrant.stats.cusum_design import RECOMMENDED_MIN_RISKS
from calibrant.stats.result import Estimate

EVALUATIONS_PER_YEAR = {"day": 365.25, "week": 365.25 / 7, "month": 12.0}
INTERVAL_METRICS = (
    "mean_probability", "observed_rate", "oe_ratio", "log_loss", "brier",
    "calibration_intercept", "calibration_slope", "auc",
)
LABEL_FREE_METRICS = ("n_predictions", "mean_probability", "psi", "label_coverage", "n_immature")


class Kind(StrEnum):
    CHART = "calibration_chart"
    EXCESS_LOG_LOSS = "excess_log_loss"
    THRESHOLD = "metric_threshold"
    DRIFT = "score_drift"
    STARVATION = "starvation"


WINDOW_KINDS = (Kind.EXCESS_LOG_LOSS, Kind.THRESHOLD, Kind.DRIFT)
Granularity = Literal["day", "week", "month"]


class _Params(BaseModel):
    model_config = ConfigDict(extra="forbid")


class ChartParams(_Params):
    """Risk-adjusted Bernoulli CUSUM (Steiner et al. 2000) on one side."""

    odds_ratio: float = Field(
        UPPER_ODDS_RATIO, gt=0, description="R_A: 2 watches for more events, ½ for fewer"
    )
    false_alarms_per_year: float = Field(
        1.0, gt=0, le=365, description="budget for the whole model, shared by all its chart streams"
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


class ExcessLogLossParams(_Params):
    granularity: Granularity = "week"
    level: float = Field(0.01, gt=0, lt=0.5)
    min_relative_effect: float = Field(0.05, ge=0, description="excess ≥ this × expected log-loss")
    min_labeled: int = Field(200, ge=20)
    min_per_class: int = Field(10, ge=1)


class ThresholdParams(_Params):
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
        if self.interval_excludes is not None and self.metric not in INTERVAL_METRICS:
            raise ValueError(
                f"{self.metric} has no interval; interval_excludes needs one of {INTERVAL_METRICS}"
            )
        return self


class DriftParams(_Params):
    granularity: Granularity = "week"
    level: float = Field(0.01, gt=0, lt=0.5)
    min_psi: float = Field(0.1, ge=0, description="effect floor (0.1: common practice, no published source)")
    min_predictions: int = Field(100, ge=10)


class StarvationParams(_Params):
    max_silence_hours: float = Field(24.0, gt=0)
    max_unlabeled_share: float = Field(0.5, gt=0, le=1)
    window_days: int = Field(7, ge=1, le=366)
    min_mature: int = Field(50, ge=1)


PARAMS: dict[Kind, type[_Params]] = {
    Kind.CHART: ChartParams,
    Kind.EXCESS_LOG_LOSS: ExcessLogLossParams,
    Kind.THRESHOLD: ThresholdParams,
    Kind.DRIFT: DriftParams,
    Kind.STARVATION: StarvationParams,
}


def parse_params(kind: Kind, params: dict[str, Any]) -> _Params:
    return PARAMS[kind].model_validate(params)


DEFAULT_RULES: tuple[tuple[str, Kind, dict[str, Any]], ...] = (
    ("calibration-chart-upper", Kind.CHART, {"odds_ratio": UPPER_ODDS_RATIO}),
    ("calibration-chart-lower", Kind.CHART, {"odds_ratio": LOWER_ODDS_RATIO}),
    ("excess-log-loss-weekly", Kind.EXCESS_LOG_LOSS, {}),
    ("calibration-slope-weekly", Kind.THRESHOLD,
     {"metric": "calibration_slope", "lower": 0.8, "upper": 1.2, "interval_excludes": 1.0, "min_n": 200}),
    ("score-drift-weekly", Kind.DRIFT, {}),
    ("feed-starvation", Kind.STARVATION, {}),
)


# ----------------------------------------------------------------------------- self-description
def describe(kind: Kind, params: _Params, *, streams: int, chart_streams: int) -> dict[str, Any]:
    """What the rule detects, the data it needs, and its false-alarm statement."""
    if isinstance(params, ChartParams):
        side = "more" if params.odds_ratio > 1 else "fewer"
        return {
            "detects": f"{side} events than predicted: the odds of every case multiplied by "
                       f"{params.odds_ratio:g} (risk-adjusted Bernoulli CUSUM), per version and segment",
            "minimum_data": f"{params.min_design_cases} mature outcomes per stream before its limit is "
                            "designed; the chart starts after that",
            "false_alarms": {
                "per_year": params.false_alarms_per_year,
                "scope": "model",
                "statement": f"limits designed so that the model's {chart_streams} chart streams together "
                             f"raise at most {params.false_alarms_per_year:g} false alarm(s) a year: each "
                             "chart's in-control ARL = streams × its cases per day × 365.25 / budget "
                             "(Markov-chain design on the stream's own recent risks)",
            },
        }
    if isinstance(params, StarvationParams):
        return _describe_starvation(params)
    per_year = _window_per_year(params, streams)
    if isinstance(params, ExcessLogLossParams):
        return {
            "detects": "excess log-loss (observed minus its expectation under calibration) of a closed, "
                       "mature period above the reference's; a changed case mix alone does not raise it",
            "minimum_data": f"{params.min_labeled} labeled predictions and {params.min_per_class} of "
                            "each class in the period",
            "false_alarms": {"per_year": per_year, "level": params.level, "scope": "rule",
                             "statement": f"one-sided test at level {params.level:g} once per "
                                          f"{params.granularity} on {streams} stream(s)"},
        }
    if isinstance(params, ThresholdParams):
        bounds = f"[{params.lower}, {params.upper}]"
        rate: dict[str, Any]
        if params.interval_excludes is not None:
            rate = {"per_year": per_year, "level": 0.05, "scope": "rule",
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
            "minimum_data": f"{params.min_n} " + ("predictions" if params.metric in LABEL_FREE_METRICS
                                                    else "labeled predictions") + " in the period",
            "false_alarms": rate,
        }
    if isinstance(params, DriftParams):
        return {
            "detects": "score distribution of a closed period shifted from the reference (PSI on "
                       "reference-decile bins), before outcomes can tell",
            "minimum_data": f"{params.min_predictions} predictions in the period and a reference",
            "false_alarms": {"per_year": per_year, "level": params.level, "scope": "rule",
                             "statement": f"PSI above its no-shift {1 - params.level:.0%} point "
                                          "χ²(B−1)(1/n + 1/m) and above "
                                          f"{params.min_psi:g}, once per {params.granularity} on "
                                          f"{streams} stream(s)"},
        }
    raise TypeError(f"no description for {type(params).__name__}")


def _describe_starvation(params: StarvationParams) -> dict[str, Any]:
    return {
        "detects": f"no predictions for {params.max_silence_hours:g} h, or more than "
                   f"{params.max_unlabeled_share:.0%} of the last {params.window_days} days' mature "
                   "predictions without an outcome",
        "minimum_data": f"{params.min_mature} mature predictions for the outcome share",
        "false_alarms": {"per_year": None, "level": None, "scope": "rule",
                         "statement": "a deterministic condition on the feeds, not a statistical test: "
                                      "it alarms exactly when the condition holds"},
    }


def _window_per_year(params: Any, streams: int) -> float:
    level = getattr(params, "level", 0.05)
    return level * EVALUATIONS_PER_YEAR[params.granularity] * max(streams, 1)


# ----------------------------------------------------------------------------- decisions
@dataclass(frozen=True, slots=True)
class Decision:
    """``crossed`` None: not enough data to judge (an open alarm then stays as it is)."""

    crossed: bool | None
    statistic: float | None
    n: int
    summary: str
    interval: tuple[float, float] | None = None
    detail: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class LogLossSums:
    """Labeled-row sums of a window: n, events, Σℓ, ΣH(p), Σ p(1−p)x² (docs/methods.md §2)."""

    n: float
    n1: float
    sl: float
    sh: float
    sv: float


def whole(count: float) -> int:
    """A count summed from float summaries (a whole number held as a float) as the int it is."""
    return round(count)


def excess_log_loss(current: LogLossSums, reference: LogLossSums | None,
                    params: ExcessLogLossParams) -> Decision:
    """One-sided test of Δ = D − D_ref > 0, D = (Σℓ − ΣH)/n the excess log-loss.

    Under calibration E[ℓ_i] = H(p_i) and Var ℓ_i = p_i(1 − p_i)x_i², x = logit p
    (docs/methods.md §5, [D]), so Var0 D = Σv/n². z = Δ / sqrt(Var0 D + Var0 D_ref); cross when
    z > z_{1−α} and Δ ≥ min_relative_effect × E0[LL]. Without a labeled reference
    D_ref = 0 (the model is compared with perfect calibration). Raw log-loss
    difference is reported as context only: it moves with the case mix.
    """
    n0 = current.n - current.n1
    if current.n < params.min_labeled or min(current.n1, n0) < params.min_per_class:
        return Decision(None, None, whole(current.n),
                        f"too few cases: {current.n:g} labeled ({current.n1:g} events); needs "
                        f"{params.min_labeled} and {params.min_per_class} of each class")
    if current.sv <= 0:
        return Decision(None, None, whole(current.n), "null variance is 0 (every p is 0, ½ or 1)")
    d = (current.sl - current.sh) / current.n
    var = current.sv / current.n**2
    d_ref = var_ref = 0.0
    ll_ref = None
    if reference is not None and reference.n > 0:
        d_ref = (reference.sl - reference.sh) / reference.n
        var_ref = reference.sv / reference.n**2
        ll_ref = reference.sl / reference.n
    delta = d - d_ref
    se = math.sqrt(var + var_ref)
    z = delta / se
    z_crit = float(stats.norm.ppf(1.0 - params.level))
    expected = current.sh / current.n
    floor = params.min_relative_effect * expected
    crossed = bool(z > z_crit and delta >= floor)
    ll = current.sl / current.n
    detail = {
        "excess_log_loss": d, "reference_excess_log_loss": d_ref, "z": z, "z_critical": z_crit,
        "p_value": float(stats.norm.sf(z)), "level": params.level, "expected_log_loss": expected,
        "minimum_effect": floor, "log_loss": ll,
        "raw_log_loss_difference": None if ll_ref is None else ll - ll_ref,
        "reference": "labeled reference" if ll_ref is not None else "none: compared with calibration",
    }
    return Decision(crossed, delta, whole(current.n),
                    f"excess log-loss {d:.4f} vs reference {d_ref:.4f} (z = {z:.2f}, "
                    f"critical {z_crit:.2f}, minimum effect {floor:.4f})",
                    (delta - 1.959964 * se, delta + 1.959964 * se), detail)


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


def drift(est: Estimate, params: DriftParams) -> Decision:
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
    null = float(stats.chi2.ppf(1.0 - params.level, n_bins - 1)) * (1.0 / n_ref + 1.0 / n_cur)
    limit = max(null, params.min_psi)
    return Decision(bool(est.value > limit), est.value, whole(n_cur),
                    f"PSI {est.value:.4f} vs limit {limit:.4f} (no-shift point {null:.4f})", None,
                    {"null_level": null, "limit": limit, "n_bins": n_bins, "n_reference": whole(n_ref),
                     "level": params.level, "edges": edges})


def starvation(silence_hours: float | None, mature: float, unlabeled: float,
               params: StarvationParams) -> Decision:
    """Silence longer than allowed, or too large an unlabeled share of mature predictions."""
    if silence_hours is None:
        return Decision(None, None, 0, "no predictions yet")
    silent = silence_hours > params.max_silence_hours
    share = unlabeled / mature if mature >= params.min_mature else None
    starved = share is not None and share > params.max_unlabeled_share
    parts = [f"last prediction {silence_hours:.1f} h ago (limit {params.max_silence_hours:g} h)"]
    if share is not None:
        parts.append(f"{share:.0%} of {mature:g} mature predictions without outcome "
                     f"(limit {params.max_unlabeled_share:.0%})")
    return Decision(bool(silent or starved), share if share is not None else silence_hours, whole(mature),
                    "; ".join(parts), None,
                    {"silence_hours": silence_hours, "unlabeled_share": share, "mature": whole(mature),
                     "silent": silent, "outcomes_missing": starved})
