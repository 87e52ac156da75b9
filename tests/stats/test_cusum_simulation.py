"""Monte-Carlo run lengths (calibrant.stats.cusum_simulation)."""

from __future__ import annotations

import numpy as np
import pytest
from cusum_reference import REFERENCE, beta_2_8_quantile_points

from calibrant.stats.cusum_design import design_cusum
from calibrant.stats.cusum_simulation import simulate_first_passage, simulated_arl

SEED = 20240612  # fixed and declared so a failure can be replayed


def test_simulation_confirms_the_designed_h():
    # docs/methods.md §18 step 3: verify the designed h with fresh paths; tolerance 3 Monte-Carlo SE.
    risks = beta_2_8_quantile_points(20000)
    design = design_cusum(risks, 10_000, 2.0)
    sim = simulated_arl(risks, 2.0, design.h, n_paths=2000, seed=SEED)
    assert sim.n_paths == 2000
    assert abs(sim.mean - design.achieved_arl0) < 3 * sim.se
    assert sim.se == pytest.approx(sim.mean / np.sqrt(2000), rel=0.15)  # near-geometric run length


@pytest.mark.parametrize(("key", "r_a"), [("upper_RA_2", 2.0), ("lower_RA_0.5", 0.5)])
def test_zero_state_arl1_agrees_with_reference_simulation(key, r_a):
    # cusum_reference_values.json (tests/reference/cusum_simulation.py, 4000 runs).
    ref = REFERENCE["beta_2_8"][key]
    sim = simulated_arl(
        beta_2_8_quantile_points(),
        r_a,
        ref["h_simulation"],
        n_paths=4000,
        seed=SEED,
        odds_ratio=ref["true_odds_ratio"],
    )
    other = ref["arl1_zero_state_simulated"]
    assert abs(sim.mean - other["mean"]) < 3 * np.hypot(sim.se, other["se"])


def test_geometric_run_length_when_every_event_signals():
    # Analytic check: p = 0.5, R_A = 2, h = 0.1 < ln(4/3): the chart signals at the first
    # event, so the run length is geometric with mean 1/0.5 = 2 and variance 2.
    fp = simulate_first_passage([0.5], 2.0, [0.1], 20000, np.random.default_rng(SEED))[:, 0]
    assert fp.min() == 1
    assert abs(fp.mean() - 2.0) < 3 * np.sqrt(2.0 / fp.size)


def test_first_passage_grid_is_monotone_in_h():
    # S_t does not depend on h: a higher limit is passed no earlier.
    fp = simulate_first_passage(
        beta_2_8_quantile_points(), 2.0, [1.0, 2.0, 3.0], 300, np.random.default_rng(SEED)
    )
    assert np.all(np.diff(fp, axis=1) >= 0)
    assert np.all(fp >= 1)


def test_simulation_is_reproducible_from_its_seed():
    a = simulated_arl([0.1, 0.3], 2.0, 2.0, n_paths=200, seed=5)
    b = simulated_arl([0.1, 0.3], 2.0, 2.0, n_paths=200, seed=5)
    assert a == b


def test_bad_simulation_inputs():
    rng = np.random.default_rng(SEED)
    with pytest.raises(ValueError, match="empty"):
        simulate_first_passage([], 2.0, [1.0], 10, rng)
    with pytest.raises(ValueError, match="h_grid"):
        simulate_first_passage([0.2], 2.0, [2.0, 1.0], 10, rng)
    with pytest.raises(ValueError, match="signalled"):
        simulate_first_passage([0.2], 2.0, [50.0], 10, rng, max_cases=1000)
