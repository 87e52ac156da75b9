"""The window rules' tests against computations outside the project.

Sources: scikit-learn ``log_loss`` for Σℓ/n; scipy ``special.entr`` for the binary
entropy; the variance of a two-point distribution computed with numpy for the null
variance of one case's log-loss; scipy ``stats.norm`` for the one-sided p-value; and a
seeded simulation of PSI under no shift for the χ² point (docs/methods.md §17.2).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special, stats
from sklearn.metrics import log_loss

from calibrant.stats.window_tests import LogLossSums, excess_log_loss_test, psi_no_shift_level


def _sums(p: np.ndarray, y: np.ndarray) -> LogLossSums:
    x = np.log(p / (1 - p))
    loss = -(y * np.log(p) + (1 - y) * np.log1p(-p))
    entropy = special.entr(p) + special.entr(1 - p)
    return LogLossSums(n=float(p.size), n1=float(y.sum()), sl=float(loss.sum()),
                       sh=float(entropy.sum()), sv=float((p * (1 - p) * x**2).sum()))


def test_null_variance_of_one_case_is_the_two_point_variance() -> None:
    # A case's log-loss takes -ln p with probability p and -ln(1-p) otherwise; numpy's
    # weighted variance of those two points is p(1-p)·logit(p)², the formula's term.
    for p in (0.01, 0.2, 0.5, 0.7, 0.999):
        values = np.array([-np.log(p), -np.log1p(-p)])
        weights = np.array([p, 1 - p])
        mean = np.average(values, weights=weights)
        variance = np.average((values - mean) ** 2, weights=weights)
        assert p * (1 - p) * np.log(p / (1 - p)) ** 2 == pytest.approx(variance, rel=1e-12)
        assert mean == pytest.approx(special.entr(p) + special.entr(1 - p), rel=1e-12)


def test_excess_log_loss_against_sklearn_and_scipy() -> None:
    rng = np.random.default_rng(20240611)
    p = special.expit(rng.normal(-1.0, 1.0, 3000))
    y = (rng.random(3000) < special.expit(0.3 + 0.6 * special.logit(p))).astype(float)
    p_ref = special.expit(rng.normal(-1.0, 1.0, 2000))
    y_ref = (rng.random(2000) < p_ref).astype(float)
    test = excess_log_loss_test(_sums(p, y), _sums(p_ref, y_ref), level=0.01)

    entropy = np.mean(special.entr(p) + special.entr(1 - p))
    entropy_ref = np.mean(special.entr(p_ref) + special.entr(1 - p_ref))
    d = log_loss(y, p) - entropy
    d_ref = log_loss(y_ref, p_ref) - entropy_ref
    var = np.sum(p * (1 - p) * special.logit(p) ** 2) / p.size**2
    var_ref = np.sum(p_ref * (1 - p_ref) * special.logit(p_ref) ** 2) / p_ref.size**2
    z = (d - d_ref) / np.sqrt(var + var_ref)
    assert test.log_loss == pytest.approx(log_loss(y, p), rel=1e-10)
    assert test.excess == pytest.approx(d, rel=1e-9)
    assert test.reference_excess == pytest.approx(d_ref, rel=1e-9)
    assert test.z == pytest.approx(z, rel=1e-9)
    assert test.p_value == pytest.approx(stats.norm.sf(z), rel=1e-9)
    assert test.z_critical == pytest.approx(stats.norm.ppf(0.99), rel=1e-12)
    # over-confident probabilities (true slope 0.6) lose more than calibrated ones would
    assert test.z > test.z_critical


def test_without_reference_the_window_is_compared_with_calibration() -> None:
    rng = np.random.default_rng(7)
    p = special.expit(rng.normal(-2.0, 0.8, 1000))
    y = (rng.random(1000) < p).astype(float)
    alone = excess_log_loss_test(_sums(p, y), None, level=0.05)
    empty = excess_log_loss_test(_sums(p, y), LogLossSums(0, 0, 0, 0, 0), level=0.05)
    assert alone.reference_log_loss is None
    assert alone.reference_excess == 0.0
    assert empty.z == alone.z
    with pytest.raises(ValueError, match="null variance"):
        excess_log_loss_test(LogLossSums(0, 0, 0, 0, 0), None, level=0.05)


def test_psi_no_shift_point_matches_a_seeded_simulation() -> None:
    # PSI of two samples drawn from one distribution over 10 frozen decile bins:
    # the simulated 95 % point should sit near χ²_{0.95, 9}·(1/m + 1/n). The expansion
    # is second-order, so the tolerance is 10 % (a Monte-Carlo error of about 2 % here).
    rng = np.random.default_rng(11)
    m = n = 2000
    bins, runs = 10, 3000
    probabilities = np.full(bins, 1 / bins)
    ref = rng.multinomial(m, probabilities, size=runs) / m
    cur = rng.multinomial(n, probabilities, size=runs) / n
    ref, cur = np.clip(ref, 1e-4, None), np.clip(cur, 1e-4, None)
    psi = np.sum((cur - ref) * np.log(cur / ref), axis=1)
    simulated = float(np.quantile(psi, 0.95))
    assert psi_no_shift_level(0.05, bins, m, n) == pytest.approx(simulated, rel=0.10)
