"""Designing h by the Markov chain (calibrant.stats.cusum_design, cusum_markov)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from cusum_reference import REFERENCE, beta_2_8_quantile_points

from calibrant.stats.cusum_design import (
    arl0_for_false_alarm_budget,
    design_cusum,
    out_of_control_arl,
)
from calibrant.stats.cusum_markov import increment_mix, markov_arl, transition_matrix

BETA = REFERENCE["beta_2_8"]
CHARTS = [("upper_RA_2", 2.0), ("lower_RA_0.5", 0.5)]


@pytest.mark.parametrize(("key", "r_a"), CHARTS)
def test_midpoint_chain_reproduces_reference_chain(key, r_a):
    # tests/reference/cusum_chain.py (midpoint states, 2000 Beta(2,8) quantile points),
    # recorded in cusum_reference_values.json: ARL0 at the simulated h with 1200 states.
    ref = BETA[key]
    mix = increment_mix(beta_2_8_quantile_points(), r_a, max_points=2000)
    arl = markov_arl(ref["h_simulation"], mix, 1200, "midpoint")
    assert arl == pytest.approx(ref["arl0_markov_1200_states_at_h"], rel=2e-5)


@pytest.mark.parametrize(("key", "r_a"), CHARTS)
def test_design_matches_reference_h(key, r_a):
    # cusum_reference_values.json (tests/reference): Markov h 5.6891 (upper) and
    # 5.4812-5.4848 (lower) for Beta(2,8) risks, target ARL0 10,000; simulation 5.698 / 5.487.
    ref = BETA[key]
    design = design_cusum(beta_2_8_quantile_points(20000), ref["target_arl0"], r_a)
    markov_h = [float(v) for v in ref["h_markov_by_states"].values()]
    assert min(markov_h) * 0.999 <= design.h <= max(markov_h) * 1.001
    assert design.h == pytest.approx(ref["h_simulation"], rel=0.01)
    assert design.achieved_arl0 == pytest.approx(10_000, rel=1e-3)
    assert design.discretisation_change < 0.01
    assert design.n_risks == 20000
    assert design.n_risk_points <= 1024
    assert design.risks.mean == pytest.approx(0.2, abs=1e-4)  # Beta(2,8) mean = 2/10
    json.dumps(design.to_dict())


@pytest.mark.parametrize(("key", "r_a"), CHARTS)
def test_zero_state_arl1_matches_reference(key, r_a):
    # cusum_reference_values.json: zero-state ARL1, true odds x2 (upper) / x0.5 (lower),
    # Markov chain and a 4000-run simulation (tests/reference/cusum_simulation.py).
    ref = BETA[key]
    arl1 = out_of_control_arl(
        ref["h_simulation"], beta_2_8_quantile_points(), r_a, ref["true_odds_ratio"]
    )
    assert arl1 == pytest.approx(ref["arl1_zero_state_markov_1200_states"], rel=2e-3)
    sim = ref["arl1_zero_state_simulated"]
    assert abs(arl1 - sim["mean"]) < 3 * sim["se"] + 0.01 * sim["mean"]


def test_compression_changes_h_very_little():
    # Property of the moment-keeping compression: 256 logit bins vs every risk as its own point.
    risks = np.random.default_rng(11).beta(2, 8, 3000)
    exact = design_cusum(risks, 10_000, 2.0, max_points=3000)
    compressed = design_cusum(risks, 10_000, 2.0, max_points=256)
    assert compressed.h == pytest.approx(exact.h, abs=2e-3)
    assert compressed.n_risk_points <= 256 < exact.n_risk_points


def test_linear_chain_converges_to_midpoint_chain_limit():
    # Both discretisations approximate the same ARL (Brook & Evans 1972); at 1600 states
    # they agree within 0.3 % for Beta(2,8), R_A = 2, h = 5.698 (reference chain: 10094.4).
    mix = increment_mix(beta_2_8_quantile_points(), 2.0, max_points=2000)
    linear = markov_arl(5.698, mix, 1600, "linear")
    assert linear == pytest.approx(BETA["upper_RA_2"]["arl0_markov_1200_states_at_h"], rel=3e-3)


def test_transition_rows_are_substochastic():
    # Definition of Q (Brook & Evans 1972): row i sums to 1 - P(signal on the next case).
    # From S = 0 with h = 0.5 the chart signals iff y = 1 and ln 2 - ln(1 + p) > 0.5,
    # i.e. p < 2 exp(-0.5) - 1; from S = h (linear scheme) any event (W > 0) signals.
    p = beta_2_8_quantile_points()
    mix = increment_mix(p, 2.0, max_points=2000)
    signal_from_zero = np.sum(p[p < 2 * np.exp(-0.5) - 1]) / p.size
    for scheme in ("linear", "midpoint"):
        Q = transition_matrix(0.5, mix, 50, scheme)
        assert np.all(Q >= 0)
        assert np.all(Q.sum(axis=1) <= 1.0 + 1e-12)
        assert Q[0].sum() == pytest.approx(1 - signal_from_zero, abs=1e-12)
    Q = transition_matrix(0.5, mix, 50, "linear")
    assert Q[-1].sum() == pytest.approx(1 - p.mean(), abs=1e-12)


def test_budget_translates_time_into_cases():
    # Renewal rate argument (docstring): K x cases/day x 365.25 / budget.
    assert arl0_for_false_alarm_budget(1000, 2, 1.0) == pytest.approx(730_500)
    assert arl0_for_false_alarm_budget(50, 10, 2.0) == pytest.approx(50 * 10 * 365.25 / 2)
    with pytest.raises(ValueError, match="n_charts"):
        arl0_for_false_alarm_budget(1000, 0)
    with pytest.raises(ValueError, match="cases_per_day"):
        arl0_for_false_alarm_budget(0, 2)


def test_empty_risk_sample_is_a_clear_error():
    with pytest.raises(ValueError, match="empty"):
        design_cusum([], 10_000)
    with pytest.raises(ValueError, match="empty"):
        out_of_control_arl(5.0, [], 2.0, 2.0)


def test_risks_at_zero_and_one_are_clipped_not_rejected():
    # docs/methods.md §1.2 clipping: p = 0 and p = 1 become eps and 1 - eps.
    risks = np.concatenate([beta_2_8_quantile_points(), [0.0, 1.0]])
    design = design_cusum(risks, 10_000, 2.0)
    assert design.h == pytest.approx(5.689, abs=0.01)


def test_target_below_reachable_is_a_clear_error():
    # With R_A = 2 and h < ln 2 - ln 1.2 the chart signals at the first event: ARL0 >= ~1/mean p.
    with pytest.raises(ValueError, match="smallest"):
        design_cusum(beta_2_8_quantile_points(), 3.0, 2.0)
    with pytest.raises(ValueError, match="target_arl0"):
        design_cusum(beta_2_8_quantile_points(), 0.5, 2.0)


def test_risks_that_never_produce_events_cannot_reach_a_small_target():
    # All risks 0 -> clipped to eps: events essentially never happen, so no h gives ARL0 = 1e4.
    with pytest.raises(ValueError, match="smallest"):
        design_cusum(np.zeros(100), 10_000, 2.0)
