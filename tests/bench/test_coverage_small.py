"""CI version of tests/bench/coverage.py: one cell where the normal interval fails — n = 200 on
Beta(1, 20), about 10 events — with 400 replicates.

Coverage is a Monte Carlo property, so the check allows for the Monte Carlo error: with m
replicates that report an interval, a true coverage c has standard error sqrt(c(1 − c)/m);
the test accepts [93 % − 3 SE, 98.5 % + 3 SE] with SE taken at c = 0.95 (a band a correct
method leaves by chance with probability about 0.003 per metric). The targets are the
population values by scipy integration (tests/bench/coverage.population).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from tests.bench.coverage import HIGH, LOW, Cell, population, run_cell

KEYS = ("oe_ratio", "log_loss", "brier", "calibration_intercept", "observed_rate")
REPLICATES = 400


def test_population_values_of_the_calibrated_mix() -> None:
    v = population("calibrated", "beta_1_20")
    # Beta(1, 20): E[p] = 1/21; calibrated, so O/E = 1 and the CITL intercept is 0
    assert v["mean_probability"] == pytest.approx(1 / 21, rel=1e-12)
    assert v["observed_rate"] == pytest.approx(1 / 21, rel=1e-9)
    assert v["oe_ratio"] == pytest.approx(1.0, rel=1e-9)
    assert abs(v["calibration_intercept"]) < 1e-9
    assert v["calibration_slope"] == pytest.approx(1.0, rel=1e-6)
    # Brier of a calibrated forecast = E[p(1 − p)] = E[p] − E[p²]; Beta moments from scipy
    assert v["brier"] == pytest.approx(stats.beta.mean(1, 20) - stats.beta.moment(2, 1, 20), rel=1e-9)


def test_small_sample_intervals_keep_their_coverage() -> None:
    values = population("calibrated", "beta_1_20")
    result = run_cell(Cell("calibrated", "beta_1_20", 200), values, REPLICATES, seed=1, keys=KEYS)
    for key in KEYS:
        r = result[key]
        assert r["replicates"] >= 0.9 * REPLICATES, (key, r)  # ~96 % of windows reach 5 and 5
        se = math.sqrt(0.95 * 0.05 / r["replicates"])
        assert LOW - 3 * se <= r["coverage"] <= HIGH + 3 * se, (key, r)
        assert np.isfinite(r["mc_se"])
