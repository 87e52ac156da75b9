"""The excess-log-loss rule kind on its own: parameters, self-description, floors, the level it is given.

External references: the expected excess of a case, E[ℓ − H(p)] = (p − q)·logit(p)
for a true risk q, computed with numpy from that definition (docs/methods.md §5.2);
the tail of the statistic by a seeded numpy Monte Carlo; odds shifts
q = OR·p/(1 − p + OR·p) as in Steiner et al. (2000).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from pydantic import ValidationError
from scipy import special, stats

from calibrant.alarms.kinds import Kind, spec
from calibrant.alarms.kinds.excess_log_loss import SPEC, ExcessLogLossParams, decide
from calibrant.stats.result import Estimate
from calibrant.stats.summary import NEGATIVE, POSITIVE, Summary
from calibrant.stats.window_tests import LogLossSums, log_loss_sums

PARAMS = ExcessLogLossParams()


@dataclass
class Period:
    """A period as ``kinds.base.WindowInputs`` shows it, from arrays."""

    current: LogLossSums
    reference: LogLossSums | None = None

    def log_loss_sums(self) -> LogLossSums:
        return self.current

    def reference_log_loss_sums(self) -> LogLossSums | None:
        return self.reference

    def metric(self, key: str) -> Estimate:
        raise AssertionError(f"the excess-log-loss rule reads no metric (asked for {key})")


def _sums(p: np.ndarray, y: np.ndarray) -> LogLossSums:
    return log_loss_sums(Summary.from_arrays(p, np.where(y == 1, POSITIVE, NEGATIVE)), False)


def _draw(rng: np.random.Generator, p: np.ndarray, q: np.ndarray) -> LogLossSums:
    return _sums(p, (rng.random(p.size) < q).astype(int))


def _odds(p: np.ndarray, ratio: float) -> np.ndarray:
    return ratio * p / (1 - p + ratio * p)


def _expected_excess(p: np.ndarray, q: np.ndarray) -> float:
    """E[D] = Σ (p − q)·logit(p) / n when the outcomes are Bernoulli(q)."""
    return float(np.mean((p - q) * special.logit(p)))


def test_params_carry_a_budget_weight_and_no_level() -> None:
    assert PARAMS.budget_weight == 2.0
    assert "level" not in ExcessLogLossParams.model_fields
    with pytest.raises(ValidationError, match="level"):
        ExcessLogLossParams.model_validate({"level": 0.01})
    for bad in (0, -1, 101):
        with pytest.raises(ValidationError, match="budget_weight"):
            ExcessLogLossParams.model_validate({"budget_weight": bad})
    assert spec(Kind.EXCESS_LOG_LOSS) is SPEC
    assert SPEC.evaluation == "window"
    assert SPEC.in_budget(PARAMS) is True


def test_describe_says_what_it_detects_and_the_data_it_needs() -> None:
    text = SPEC.describe(ExcessLogLossParams(min_labeled=500, min_per_class=25))
    assert set(text) == {"detects", "minimum_data"}
    assert text["minimum_data"] == "500 labeled predictions and 25 of each class in the period"
    # The case-mix sentence holds only for a calibrated model (test below shows the other case).
    assert "does not raise it while the model stays calibrated" in text["detects"]
    assert "symmetric around p = ½" in text["detects"]


def test_floors_leave_a_period_unjudged() -> None:
    rng = np.random.default_rng(1)
    p = rng.beta(2, 8, 150)
    few = decide(PARAMS, Period(_draw(rng, p, p)), 0.01)
    assert few.crossed is None
    assert few.n == 150
    p = np.full(400, 0.01)
    y = np.zeros(400, int)
    y[:5] = 1  # 5 events: under the 10 per class
    rare = decide(PARAMS, Period(_sums(p, y)), 0.01)
    assert rare.crossed is None
    assert "5 events" in rare.summary


def test_a_calibrated_rare_event_period_past_the_normal_point_is_not_an_alarm() -> None:
    # Beta(1, 20) risks, n = 200, outcomes drawn from the risks themselves (calibrated). This
    # period's z exceeds z_{1−1e-3} = 3.09, so the normal test would fire; its true tail
    # P(D ≥ d_obs), by 200,000 seeded numpy draws of D on the same risks, is about 3e-3 —
    # three times the level — and the rule, reading the saddlepoint tail, does not fire.
    rng = np.random.default_rng(19271)
    p = rng.beta(1, 20, 200)
    y = (rng.random(200) < p).astype(int)
    level = 1e-3
    verdict = decide(PARAMS, Period(_sums(p, y)), level)
    detail = verdict.detail
    assert detail["z"] > detail["z_critical"] == pytest.approx(stats.norm.isf(level))
    assert detail["level"] == level
    assert detail["tail"] == "saddlepoint"
    assert verdict.crossed is False

    x = special.logit(p)
    mc = np.random.default_rng(5)
    draws = np.concatenate([(np.sum(p * x) - (mc.random((50_000, 200)) < p) @ x) / 200 for _ in range(4)])
    hits = int(np.sum(draws >= verdict.statistic))
    interval = stats.binomtest(hits, draws.size).proportion_ci(0.999)
    assert interval.low > level
    assert interval.low <= detail["p_value"] <= interval.high


def test_the_level_passed_in_decides_and_is_recorded() -> None:
    # Odds ×1.6 on Beta(2, 8) risks at n = 400: an excess whose tail probability lies
    # between the two levels tried, above the effect floor.
    rng = np.random.default_rng(4)
    p = rng.beta(2, 8, 400)
    sums = _draw(rng, p, _odds(p, 1.6))
    loose, strict = decide(PARAMS, Period(sums), 0.05), decide(PARAMS, Period(sums), 1e-6)
    assert loose.detail["level"] == 0.05
    assert strict.detail["level"] == 1e-6
    assert 1e-6 < loose.detail["p_value"] <= 0.05
    assert loose.statistic >= loose.detail["minimum_effect"]
    assert loose.crossed is True
    assert strict.crossed is False


def test_the_effect_floor_holds_back_a_significant_but_small_excess() -> None:
    # True slope 0.97 on Beta(2, 8) risks (mildly over-confident), n = 200,000: E[D] from the
    # definition is under half of 5 % of the expected log-loss, yet the test is significant.
    rng = np.random.default_rng(9)
    p = rng.beta(2, 8, 200_000)
    q = special.expit(0.97 * special.logit(p))
    sums = _draw(rng, p, q)
    expected_ll = float(np.mean(special.entr(p) + special.entr(1 - p)))
    assert 0 < _expected_excess(p, q) < 0.5 * PARAMS.min_relative_effect * expected_ll
    floored = decide(PARAMS, Period(sums), 1e-4)
    assert floored.detail["p_value"] < 1e-4
    assert floored.crossed is False
    assert decide(ExcessLogLossParams(min_relative_effect=0), Period(sums), 1e-4).crossed is True


def test_a_case_mix_change_fires_only_when_the_model_is_miscalibrated_where_the_cases_move() -> None:
    # The model is calibrated below p = ½ and over-confident above (true risk pulled halfway
    # back to ½). Reference: Beta(2, 8) cases, nearly all below ½. Current period: Beta(6, 3)
    # cases, mostly above ½. The model did not change, only the mix; the expected excess from
    # the definition moves from ~0 to clearly positive, and the rule fires. The same mix change
    # under a model calibrated everywhere does not fire.
    rng = np.random.default_rng(12)

    def truth(p: np.ndarray) -> np.ndarray:
        return np.where(p < 0.5, p, 0.5 + 0.5 * (p - 0.5))

    p_ref, p_now = rng.beta(2, 8, 20_000), rng.beta(6, 3, 3_000)
    assert abs(_expected_excess(p_ref, truth(p_ref))) < 0.002
    assert _expected_excess(p_now, truth(p_now)) > 0.05
    moved = decide(PARAMS, Period(_draw(rng, p_now, truth(p_now)), _draw(rng, p_ref, truth(p_ref))), 1e-4)
    assert moved.crossed is True
    calibrated = decide(PARAMS, Period(_draw(rng, p_now, p_now), _draw(rng, p_ref, p_ref)), 1e-4)
    assert calibrated.crossed is False


def test_an_odds_shift_is_nearly_invisible_when_risks_lie_symmetric_around_one_half() -> None:
    # Odds ×2 for every case. From the definition, the expected excess of a risk set symmetric
    # around ½ (Beta(5, 5)) rises only at second order, under the default effect floor, while
    # for Beta(2, 8) risks it is first order. 50 seeded periods of 2,000 cases each at level
    # 0.01: none fires for the symmetric set, all do for the skewed one.
    rng = np.random.default_rng(13)
    fired = {}
    for a, b in ((5, 5), (2, 8)):
        p = rng.beta(a, b, 200_000)
        expected_ll = float(np.mean(special.entr(p) + special.entr(1 - p)))
        excess = _expected_excess(p, _odds(p, 2.0))
        if a == b:
            assert 0 < excess < 0.5 * PARAMS.min_relative_effect * expected_ll
        else:
            assert excess > 2 * PARAMS.min_relative_effect * expected_ll
        count = 0
        for _ in range(50):
            p = rng.beta(a, b, 2_000)
            count += bool(decide(PARAMS, Period(_draw(rng, p, _odds(p, 2.0))), 0.01).crossed)
        fired[(a, b)] = count
    assert fired == {(5, 5): 0, (2, 8): 50}
