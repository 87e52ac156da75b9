"""The calibration-slope window kind: one extreme prediction cannot fire it, a real slope change does.

The kind is judged here on periods built from a summary of seeded rows (no
database): the period's metrics are the statistics core's, its labeled sums
the summary's. Expected values: statsmodels ``Logit`` for the slopes, scipy's
normal quantile for the critical value, numpy counting for the counts.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from pydantic import ValidationError
from scipy.special import expit, logit
from scipy.stats import norm

from calibrant.alarms.kinds.calibration_slope import (
    SPEC,
    CalibrationSlopeParams,
    calibration_slope_decision,
    decide,
)
from calibrant.alarms.kinds.metric_threshold import ThresholdParams, threshold
from calibrant.stats.result import Estimate, Status, estimate, missing
from calibrant.stats.summary import Summary
from calibrant.stats.summary_metrics import all_metrics
from calibrant.stats.window_tests import LogLossSums

LEVEL = 0.01
EPS = np.finfo(np.float64).eps
PARAMS = CalibrationSlopeParams()
# the rule shipped before this kind: bounds plus a Wald test of 1 on the plain slope only
SHIPPED = ThresholdParams(metric="calibration_slope", lower=0.8, upper=1.2, interval_excludes=1.0,
                          min_n=200)


class SummaryPeriod:
    """A closed period as a window kind reads it (``kinds.base.WindowInputs``), from one summary."""

    def __init__(self, summary: Summary) -> None:
        self._summary = summary
        self._metrics = all_metrics(summary)

    def log_loss_sums(self) -> LogLossSums:
        v = self._summary.labeled(False)
        return LogLossSums(n=v.total("all", "n"), n1=v.total("pos", "n"), sl=v.total("all", "sl"),
                           sh=v.total("all", "sh"), sv=v.total("all", "sv"))

    def reference_log_loss_sums(self) -> LogLossSums | None:
        return None

    def metric(self, key: str) -> Estimate:
        return self._metrics[key]


def _week(n: int, seed: int, *, true_slope: float = 1.0, extreme: bool = False
          ) -> tuple[np.ndarray, np.ndarray]:
    """n Beta(2, 8) predictions with outcomes from true logit = true_slope · logit(p);
    ``extreme`` adds one case p = 1e-9 that had the event."""
    rng = np.random.default_rng(seed)
    p = rng.beta(2.0, 8.0, n)
    y = (rng.random(n) < expit(true_slope * logit(p))).astype(int)
    if extreme:
        p, y = np.r_[p, 1e-9], np.r_[y, 1]
    return p, y


def _statsmodels_slope(p: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    fit = sm.Logit(y, sm.add_constant(logit(np.clip(p, EPS, 1 - EPS)))).fit(disp=0, tol=1e-12)
    return float(fit.params[1]), float(fit.bse[1])


# ----------------------------------------------------------------------------- the problem case
def _assert_not_fired_and_explained(period: SummaryPeriod, p: np.ndarray) -> None:
    verdict = decide(PARAMS, period, LEVEL)
    assert verdict.crossed is False, verdict.summary
    assert verdict.statistic == period.metric("calibration_slope").value  # the plain slope is reported
    assert verdict.detail["level"] == LEVEL
    assert verdict.detail["z_critical"] == pytest.approx(norm.ppf(1 - LEVEL / 2))  # scipy
    assert verdict.detail["n_confident_errors"] == 1  # numpy: one y = 1 with p < 1e-6
    assert verdict.detail["n_clipped"] == int(np.sum(p < EPS))  # numpy: p below ε = 2.2e-16, none
    robust = period.metric("calibration_slope_robust")
    assert verdict.detail["robust_slope"] == robust.value
    assert verdict.detail["clip"] == [robust.extra["clip_low"], robust.extra["clip_high"]]
    # the clip is the rows' 2.5th percentile logit (numpy) to within about a fine bin (0.05);
    # the extreme case's logit, −20.7, lies far below it
    assert verdict.detail["clip"][0] == pytest.approx(np.quantile(logit(p), 0.025), abs=0.1)


def test_one_extreme_prediction_among_300_cannot_fire_the_slope_rule() -> None:
    p, y = _week(300, 41, extreme=True)
    period = SummaryPeriod(Summary.from_arrays(p, y))
    slope, se = _statsmodels_slope(p, y)
    # the case does move the plain slope below the floor and, by its own Wald test, away from 1
    # (source: statsmodels Logit on the rows, the extreme case included)
    assert slope < PARAMS.lower
    assert abs(slope - 1) / se > norm.ppf(1 - LEVEL / 2)
    assert period.metric("calibration_slope").value == pytest.approx(slope, abs=3e-4)
    # so the shipped rule fires on it, and this kind does not
    assert threshold(period.metric("calibration_slope"), SHIPPED, LEVEL).crossed is True
    _assert_not_fired_and_explained(period, p)


def test_one_extreme_prediction_among_2000_cannot_fire_the_slope_rule() -> None:
    p, y = _week(2000, 42, extreme=True)
    # source: statsmodels Logit with and without the case: it lowers the slope by more than its SE
    with_case, se = _statsmodels_slope(p, y)
    without_case, _ = _statsmodels_slope(p[:-1], y[:-1])
    assert without_case - with_case > se
    _assert_not_fired_and_explained(SummaryPeriod(Summary.from_arrays(p, y)), p)


def test_over_many_weeks_the_extreme_case_rarely_fires_the_kind_and_nearly_always_the_shipped_rule(
) -> None:
    weeks = 100
    kind_fired = shipped_fired = 0
    for seed in range(weeks):
        period = SummaryPeriod(Summary.from_arrays(*_week(300, 1000 + seed, extreme=True)))
        kind_fired += bool(decide(PARAMS, period, LEVEL).crossed)
        shipped_fired += bool(threshold(period.metric("calibration_slope"), SHIPPED, LEVEL).crossed)
    # Over 2,000 other seeded weeks (docs/methods.md §9.6) the kind fired in 1.45 % and the shipped
    # rule in 94.4 %. Bounds from scipy.stats.binom at those rates: P(more than 5 of 100) = 0.35 %,
    # P(fewer than 85 of 100) = 0.015 %.
    assert kind_fired <= 5
    assert shipped_fired >= 85


def test_a_real_slope_change_crosses() -> None:
    p, y = _week(2000, 43, true_slope=0.6)
    period = SummaryPeriod(Summary.from_arrays(p, y))
    verdict = decide(PARAMS, period, LEVEL)
    slope, _ = _statsmodels_slope(p, y)
    assert verdict.crossed is True, verdict.summary
    # source: statsmodels Logit; docs/methods.md §9.4 allows 3e-4 for the summary's bin means
    assert verdict.statistic == pytest.approx(slope, abs=3e-4)
    assert verdict.detail["side"] == "below"
    assert verdict.detail["robust_slope"] < PARAMS.lower
    assert verdict.interval == period.metric("calibration_slope").ci


def test_too_moderate_predictions_cross_above() -> None:
    verdict = decide(PARAMS, SummaryPeriod(Summary.from_arrays(*_week(2000, 44, true_slope=1.6))),
                     LEVEL)
    assert verdict.crossed is True, verdict.summary
    assert verdict.detail["side"] == "above"


def test_a_calibrated_week_does_not_cross() -> None:
    verdict = decide(PARAMS, SummaryPeriod(Summary.from_arrays(*_week(2000, 45))), LEVEL)
    assert verdict.crossed is False
    assert verdict.detail["side"] is None


# ----------------------------------------------------------------------------- the four conditions
def _slope(value: float, se: float) -> Estimate:
    return estimate(value, se=se, ci=(value - 1.96 * se, value + 1.96 * se), n=1000.0,
                    extra={"clip_low": -4.0, "clip_high": 0.0, "n_winsorised": 50.0})


def _judge(plain: Estimate, robust: Estimate, *, n: float = 1000.0, n1: float = 200.0):
    return calibration_slope_decision(plain, robust, n=n, n1=n1, n_clipped=0.0, n_confident_errors=0.0,
                                      params=PARAMS, level=LEVEL)


def test_each_condition_is_needed() -> None:
    z_c = float(norm.ppf(1 - LEVEL / 2))  # 2.5758 (scipy)
    assert _judge(_slope(0.6, 0.1), _slope(0.6, 0.1)).crossed is True
    # (a) the plain test does not reject: |0.6 − 1| / 0.2 = 2 < z_c
    assert z_c > 0.4 / 0.2
    assert _judge(_slope(0.6, 0.2), _slope(0.6, 0.1)).crossed is False
    # (b) significant (z = −3) but within the floors
    assert _judge(_slope(0.85, 0.05), _slope(0.6, 0.1)).crossed is False
    # (c) the robust slope is within the floor, or beyond the other one
    assert _judge(_slope(0.6, 0.1), _slope(0.9, 0.01)).crossed is False
    assert _judge(_slope(0.6, 0.1), _slope(1.5, 0.1)).crossed is False
    # (d) the robust slope is beyond the floor but its own test does not reject: |0.7 − 1| / 0.2 < z_c
    assert _judge(_slope(0.6, 0.1), _slope(0.7, 0.2)).crossed is False


def test_without_enough_data_or_a_fit_the_kind_does_not_judge() -> None:
    good = _slope(0.6, 0.1)
    assert _judge(good, good, n=150.0, n1=40.0).crossed is None  # below min_labeled 200
    assert _judge(good, good, n=1000.0, n1=5.0).crossed is None  # below min_per_class 10
    unfit = missing(Status.TOO_FEW_CASES, "the recalibration fit diverged (near-separation)", n=1000.0)
    assert _judge(unfit, good).crossed is None
    # a plain crossing the robust fit cannot confirm is not judged either way
    verdict = _judge(good, unfit)
    assert verdict.crossed is None
    assert "diverged" in verdict.summary
    # a plain slope within bounds needs no confirmation: judged, not crossed
    assert _judge(_slope(1.0, 0.1), unfit).crossed is False


def test_detail_counts_are_integers() -> None:
    verdict = calibration_slope_decision(_slope(0.6, 0.1), _slope(0.6, 0.1), n=1000.0, n1=200.0,
                                         n_clipped=3.0, n_confident_errors=2.0, params=PARAMS, level=LEVEL)
    counts = {k: v for k, v in verdict.detail.items() if k.startswith("n_")}
    assert counts == {"n_winsorised": 50, "n_clipped": 3, "n_confident_errors": 2}
    assert all(type(v) is int for v in counts.values())
    assert type(verdict.n) is int


# ----------------------------------------------------------------------------- the spec
def test_params_defaults_and_validation() -> None:
    p = CalibrationSlopeParams()
    assert (p.granularity, p.lower, p.upper, p.min_labeled, p.min_per_class, p.budget_weight) == (
        "week", 0.8, 1.2, 200, 10, 1.0)
    for bad in ({"lower": 1.0}, {"upper": 0.9}, {"budget_weight": 0}, {"level": 0.01},
                {"min_labeled": 100, "min_per_class": 60}, {"granularity": "year"}):
        with pytest.raises(ValidationError):
            CalibrationSlopeParams.model_validate(bad)


def test_spec_describes_itself_and_is_in_the_budget() -> None:
    assert SPEC.params is CalibrationSlopeParams
    assert SPEC.in_budget(PARAMS) is True
    text = SPEC.describe(PARAMS)
    assert set(text) == {"detects", "minimum_data"}
    assert "[0.8, 1.2]" in text["detects"]
    assert "200 labeled" in text["minimum_data"]
