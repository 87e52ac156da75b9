"""The window rules' tests against computations outside the project.

Sources: scikit-learn ``log_loss`` for Σℓ/n; scipy ``special.entr`` for the binary
entropy; the variance of a two-point distribution computed with numpy for the null
variance of one case's log-loss; scipy ``stats.norm`` for the one-sided normal p-value;
the exact null distribution of the excess log-loss by enumerating every outcome of a
few rows with numpy (2^12 and 2^20 outcomes); a seeded numpy Monte Carlo of the
statistic for rare events; and a seeded simulation of PSI under no shift for the χ²
point (docs/methods.md §17.2).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, special, stats
from sklearn.metrics import log_loss

from calibrant.stats.summary import EDGES_P, EPS, NEGATIVE, POSITIVE, UNLABELED, Summary
from calibrant.stats.window_tests import (
    LogLossBins,
    LogLossSums,
    excess_log_loss_test,
    excess_upper_tail,
    log_loss_sums,
    psi_no_shift_level,
)


def _sums(p: np.ndarray, y: np.ndarray) -> LogLossSums:
    """The five scalars computed directly (no bins: the normal fallback)."""
    x = np.log(p / (1 - p))
    loss = -(y * np.log(p) + (1 - y) * np.log1p(-p))
    entropy = special.entr(p) + special.entr(1 - p)
    return LogLossSums(n=float(p.size), n1=float(y.sum()), sl=float(loss.sum()),
                       sh=float(entropy.sum()), sv=float((p * (1 - p) * x**2).sum()))


def _rows(p: np.ndarray) -> LogLossBins:
    """Each row its own cell: the saddlepoint on the exact rows."""
    return LogLossBins(count=np.ones(p.size), mean_p=p, mean_x=special.logit(p))


def _enumerate(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every outcome vector of independent Bernoulli(p) rows: S = Σ −(y − p)·logit(p), and its probability."""
    outcomes = (np.arange(2**p.size)[:, None] >> np.arange(p.size)) & 1
    prob = np.prod(np.where(outcomes == 1, p, 1 - p), axis=1)
    s = -((outcomes - p) * special.logit(p)).sum(axis=1)
    order = np.argsort(s)
    return s[order], prob[order]


def _exact_tails(s: np.ndarray, prob: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P(S ≥ s_k) and P(S > s_k) at every atom s_k (sorted)."""
    at_least = np.cumsum(prob[::-1])[::-1]
    return at_least, np.append(at_least[1:], 0.0)


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
    assert test.z_critical == pytest.approx(stats.norm.ppf(0.99), rel=1e-12)
    # Sums without bins: the stated fallback is the normal tail of z.
    assert test.tail == "normal"
    assert test.p_value == pytest.approx(stats.norm.sf(z), rel=1e-9)
    # over-confident probabilities (true slope 0.6) lose more than calibrated ones would
    assert test.significant
    # With bins, z and its interval are the same numbers; only the tail changes.
    current = log_loss_sums(Summary.from_arrays(p, np.where(y == 1, POSITIVE, NEGATIVE)), False)
    reference = log_loss_sums(Summary.from_arrays(p_ref, np.where(y_ref == 1, POSITIVE, NEGATIVE)), False)
    binned = excess_log_loss_test(current, reference, level=0.01)
    assert binned.tail == "saddlepoint"
    assert binned.z == pytest.approx(z, rel=1e-9)
    assert binned.interval == pytest.approx((d - d_ref - 1.959964 * np.sqrt(var + var_ref),
                                             d - d_ref + 1.959964 * np.sqrt(var + var_ref)), rel=1e-9)
    assert binned.significant


def test_without_reference_the_window_is_compared_with_calibration() -> None:
    rng = np.random.default_rng(7)
    p = special.expit(rng.normal(-2.0, 0.8, 1000))
    y = (rng.random(1000) < p).astype(float)
    alone = excess_log_loss_test(_sums(p, y), None, level=0.05)
    empty = excess_log_loss_test(_sums(p, y), LogLossSums(0, 0, 0, 0, 0), level=0.05)
    assert alone.reference_log_loss is None
    assert alone.reference_excess == 0.0
    assert empty.z == alone.z
    assert empty.p_value == alone.p_value
    with pytest.raises(ValueError, match="null variance"):
        excess_log_loss_test(LogLossSums(0, 0, 0, 0, 0), None, level=0.05)


def test_builder_reproduces_the_five_sums_and_the_bins_from_a_summary() -> None:
    # The sums computed directly from the rows (scikit-learn log_loss, scipy entr), and
    # the per-bin rows grouped with numpy on the fine edges, against the builder.
    rng = np.random.default_rng(31)
    p = np.concatenate([rng.beta(1, 20, 700), rng.beta(5, 5, 300), [0.0, 1e-9, 0.5, 1.0]])
    state = rng.choice([POSITIVE, NEGATIVE, UNLABELED], size=p.size, p=[0.1, 0.7, 0.2])
    state[-4:] = (NEGATIVE, NEGATIVE, POSITIVE, POSITIVE)  # clipped ends without infinite loss
    summary = Summary.from_arrays(p, state)
    for implicit in (False, True):
        labeled = (state != UNLABELED) | implicit
        pl, yl = p[labeled], (state[labeled] == POSITIVE).astype(float)
        pc = np.clip(pl, EPS, 1 - EPS)
        sums = log_loss_sums(summary, implicit)
        assert sums.n == pl.size
        assert sums.n1 == yl.sum()
        assert sums.sl == pytest.approx(log_loss(yl, pc, labels=[0, 1]) * pl.size, rel=1e-12)
        assert sums.sh == pytest.approx(np.sum(special.entr(pl) + special.entr(1 - pl)), rel=1e-12)
        assert sums.sv == pytest.approx(np.sum(pl * (1 - pl) * special.logit(pc) ** 2), rel=1e-12)
        assert sums.bins is not None
        fine = np.digitize(pl, EDGES_P)
        occupied = np.unique(fine)
        count = np.bincount(fine)[occupied]
        np.testing.assert_array_equal(sums.bins.count, count)
        np.testing.assert_allclose(sums.bins.mean_p, np.bincount(fine, pl)[occupied] / count, rtol=1e-12)
        np.testing.assert_allclose(sums.bins.mean_x, np.bincount(fine, special.logit(pc))[occupied] / count,
                                   rtol=1e-12, atol=1e-12)


def test_sums_built_from_the_five_scalars_alone_still_work() -> None:
    sums = LogLossSums(200.0, 12.0, 40.0, 38.0, 55.0)
    assert sums.bins is None
    assert sums == LogLossSums(200.0, 12.0, 40.0, 38.0, 55.0, bins=_rows(np.array([0.1])))


def test_saddlepoint_tail_against_exact_enumeration_of_twelve_rows() -> None:
    # 12 rows with distinct risks, 4096 outcomes enumerated with numpy. Where the exact tail
    # crosses each level, the saddlepoint must lie in [P(S > s), P(S ≥ s)] widened by 3 %
    # (the approximation smooths a distribution of 4096 atoms); the normal tail of z
    # misses by far more at small levels.
    rng = np.random.default_rng(3)
    p = np.sort(rng.beta(1, 8, 12))
    s, prob = _enumerate(p)
    at_least, above = _exact_tails(s, prob)
    sd = np.sqrt(np.sum(p * (1 - p) * special.logit(p) ** 2))
    for level in (0.2, 0.05, 1e-2, 1e-3, 1e-4, 1e-5):
        k = np.flatnonzero(at_least >= level)[-1]
        tail = excess_upper_tail([(_rows(p), 1.0)], 0.0, s[k])
        assert above[k] * 0.97 <= tail <= at_least[k] * 1.03, level
        if level <= 1e-3:
            assert stats.norm.sf(s[k] / sd) < 0.5 * above[k]
    # scale: the same rows as a mean (1/n) give the same tail at δ = s/n
    k = np.flatnonzero(at_least >= 1e-3)[-1]
    assert excess_upper_tail([(_rows(p), 1 / 12)], 0.0, s[k] / 12) == pytest.approx(
        excess_upper_tail([(_rows(p), 1.0)], 0.0, s[k]), rel=1e-9)


def test_saddlepoint_at_the_mean_and_at_the_ends_of_the_support() -> None:
    rng = np.random.default_rng(3)
    p = np.sort(rng.beta(1, 8, 12))
    x = special.logit(p)
    s, prob = _enumerate(p)
    at_least, _ = _exact_tails(s, prob)
    rows = [(_rows(p), 1.0)]
    # At the mean (0), which falls in a gap between atoms of this small skewed sum: within
    # 0.025 of the exact P(S ≥ 0) = 0.451 (the normal tail says 0.5); continuous across the
    # switch between Lugannani–Rice and the Edgeworth limit at |z| = 1e-4.
    k = np.searchsorted(s, 0.0)
    assert excess_upper_tail(rows, 0.0, 0.0) == pytest.approx(at_least[k], abs=0.025)
    sd = np.sqrt(np.sum(p * (1 - p) * x**2))
    for side in (-1, 1):
        inside = excess_upper_tail(rows, 0.0, side * 0.99999e-4 * sd)
        outside = excess_upper_tail(rows, 0.0, side * 1.00001e-4 * sd)
        assert inside == pytest.approx(outside, abs=1e-5)
    # The largest attainable S has every row at its worse outcome (y = 1 here: every p < ½):
    # its probability is Π p exactly; beyond it the tail is 0; at or below the least, 1.
    assert s[-1] == pytest.approx(np.sum(-(1 - p) * x))
    assert excess_upper_tail(rows, 0.0, s[-1]) == pytest.approx(prob[-1], rel=1e-9)
    assert excess_upper_tail(rows, 0.0, s[-1] + 1.0) == 0.0
    assert excess_upper_tail(rows, 0.0, s[0]) == 1.0
    assert excess_upper_tail(rows, 0.0, s[0] - 1.0) == 1.0
    # Just inside the maximum the tail is tiny yet still positive (no overflow on the way).
    near = excess_upper_tail(rows, 0.0, s[-1] - 1e-3)
    assert 0.0 < near < at_least[-2]


def test_a_lattice_sum_takes_the_continuity_correction_against_scipy_binomial() -> None:
    # All rows at one score p: S = −logit(p)·(Y − np) with Y ~ Binomial(n, p), so the exact
    # tail at each attainable S is scipy's binomial tail (sf for p < ½, cdf for p > ½). With the
    # continuity correction the saddlepoint matches it to 1 %; the plain formula would sit near
    # the middle of each jump, up to ~1.6 times too small at these levels.
    for n, p in ((200, 0.05), (2000, 0.01), (200, 0.7)):
        x = float(special.logit(p))
        bins = LogLossBins(count=np.array([float(n)]), mean_p=np.array([p]), mean_x=np.array([x]))
        checked = 0
        for k in range(n + 1):
            exact = stats.binom.sf(k - 1, n, p) if x < 0 else stats.binom.cdf(k, n, p)
            if 1e-5 < exact < 0.05:
                tail = excess_upper_tail([(bins, 1.0)], 0.0, -x * (k - n * p))
                assert tail == pytest.approx(exact, rel=0.01)
                checked += 1
        assert checked >= 8


def test_saddlepoint_with_a_binned_reference_against_exact_enumeration() -> None:
    # Δ = S/12 − S_ref/8 over 12 + 8 rows: 2^20 outcomes enumerated with numpy. With so few
    # rows on each side the approximation is within 15 % (5-12 % above the exact tail at
    # 1e-3 to 1e-4 for this seed, the conservative side).
    rng = np.random.default_rng(8)
    p, p_ref = rng.beta(1, 6, 12), rng.beta(1, 6, 8)
    s, prob = _enumerate(p)
    s_ref, prob_ref = _enumerate(p_ref)
    delta = (s[:, None] / 12 - s_ref[None, :] / 8).ravel()
    weight = (prob[:, None] * prob_ref[None, :]).ravel()
    order = np.argsort(delta)
    delta, weight = delta[order], weight[order]
    at_least, above = _exact_tails(delta, weight)
    cells = [(_rows(p), 1 / 12), (_rows(p_ref), -1 / 8)]
    for level in (0.05, 1e-3, 1e-5):
        k = np.flatnonzero(at_least >= level)[-1]
        tail = excess_upper_tail(cells, 0.0, delta[k])
        assert above[k] * 0.85 <= tail <= at_least[k] * 1.15, level


def test_saddlepoint_with_a_normal_reference_term_against_exact_convolution() -> None:
    # Reference as an independent N(0, v) term: P(S/n − R ≥ δ) = Σ_atoms P(S = s)·Φ((s/n − δ)/√v),
    # evaluated with scipy over the 4096 enumerated atoms.
    rng = np.random.default_rng(3)
    p = np.sort(rng.beta(1, 8, 12))
    s, prob = _enumerate(p)
    var_ref = np.sum(p * (1 - p) * special.logit(p) ** 2) / 12**2 / 4  # a reference 4× as large
    for delta in (0.2, 0.5, 0.9, 1.2):
        exact = float(np.sum(prob * stats.norm.cdf((s / 12 - delta) / np.sqrt(var_ref))))
        tail = excess_upper_tail([(_rows(p), 1 / 12)], var_ref, delta)
        assert tail == pytest.approx(exact, rel=0.03), delta
    # through the test: a reference of scalars alone enters as that normal term
    ref = LogLossSums(n=48.0, n1=5.0, sl=20.0, sh=20.0, sv=var_ref * 48**2)
    cur = LogLossSums(n=12.0, n1=3.0, sl=0.9 * 12, sh=0.0, sv=np.sum(p * (1 - p) * special.logit(p) ** 2),
                      bins=_rows(p))
    test = excess_log_loss_test(cur, ref, level=0.01)
    exact = float(np.sum(prob * stats.norm.cdf((s / 12 - 0.9) / np.sqrt(var_ref))))
    assert test.tail == "saddlepoint"
    assert test.p_value == pytest.approx(exact, rel=0.03)


def test_rare_events_saddlepoint_level_against_a_seeded_monte_carlo() -> None:
    # Beta(1, 20) risks, n = 200: the saddlepoint's 1e-3 critical value of D, from the fine
    # bins of the period's summary, against 400,000 seeded numpy draws of D = Σ −(y − p)x / n
    # on the exact rows. The rate must fall inside the binomial 99.9 % interval of 1e-3
    # (scipy binomtest); the normal critical value of z is exceeded about three times as often.
    rng = np.random.default_rng(20)
    n, level, reps = 200, 1e-3, 400_000
    p = rng.beta(1, 20, n)
    x = special.logit(p)
    bins = log_loss_sums(Summary.from_arrays(p, np.zeros(n, int)), False).bins
    assert bins is not None
    sd = np.sqrt(np.sum(p * (1 - p) * x**2)) / n
    critical = optimize.brentq(lambda d: excess_upper_tail([(bins, 1 / n)], 0.0, d) - level, 0.0, 10 * sd)
    mc = np.random.default_rng(21)
    centre = np.sum(p * x)
    draws = np.concatenate([(centre - (mc.random((50_000, n)) < p) @ x) / n for _ in range(reps // 50_000)])
    hits = int(np.sum(draws >= critical))
    interval = stats.binomtest(hits, reps).proportion_ci(0.999)
    assert interval.low <= level <= interval.high
    normal_rate = np.mean(draws >= stats.norm.isf(level) * sd)
    assert normal_rate > 2 * level


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
