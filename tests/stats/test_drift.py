"""PSI, KS and Jensen–Shannon (calibrant.stats.drift) against scipy and docs/methods.md §21."""

from __future__ import annotations

import math

import numpy as np
import pytest
from metrics_reference import REF, breast_cancer, ref, synthetic
from scipy import stats
from scipy.spatial.distance import jensenshannon

from calibrant.stats import drift
from calibrant.stats.result import Status

SYN = "synthetic_drift_vs_reference"
BC = "breast_cancer_drift_train_vs_test_scores"


def test_psi_synthetic() -> None:
    p, _, p_ref = synthetic()
    # source: docs/methods.md §21 `psi_ref_deciles` (numpy; np.quantile deciles, np.histogram)
    assert drift.psi(p_ref, p, smoothing=0).value == pytest.approx(
        ref(SYN, "psi_ref_deciles"), rel=1e-12)
    r = drift.psi(p_ref, p)
    assert r.value == pytest.approx(0.0622553, rel=1e-6)  # docs/methods.md §21 "+0.5 smoothing"
    # source: docs/methods.md §21 `psi_null_95pct_chi2_approx` (scipy.stats.chi2.ppf)
    assert r.extra["null_95"] == pytest.approx(ref(SYN, "psi_null_95pct_chi2_approx"), rel=1e-12)
    assert r.extra["null_95"] == pytest.approx(stats.chi2.ppf(0.95, 9) * (2 / 2000), rel=1e-12)
    assert r.extra["common_practice_minor"] == 0.1
    sim = drift.psi(p_ref, p, n_null=500, seed=1).extra["null_95_simulated"]
    # simulated null 95 % point: docs/methods.md §21 reports 0.0167 (2000 simulations)
    assert sim == pytest.approx(ref(SYN, "psi_null_95pct_simulated"), rel=0.15)


def test_psi_breast_cancer_and_counts() -> None:
    p, _, p_tr = breast_cancer()
    r = drift.psi(p_tr, p)
    # source: docs/methods.md §21 breast cancer `psi_ref_deciles_laplace0.5`
    v = ref(BC, "psi_ref_deciles_laplace0.5")
    assert r.value == pytest.approx(v, rel=1e-12)
    edges = drift.reference_bin_edges(p_tr)
    rc, cc = drift.histogram(p_tr, edges), drift.histogram(p, edges)
    # the counts recorded with the check (np.histogram, left-closed bins)
    assert rc.tolist() == REF[BC]["psi_ref_deciles_laplace0.5"]["ref_counts"]
    assert cc.tolist() == REF[BC]["psi_ref_deciles_laplace0.5"]["cur_counts"]
    assert drift.psi_from_counts(rc, cc).value == r.value


def test_psi_edges() -> None:
    r = drift.psi_from_counts([10, 0], [5, 5], smoothing=0)
    assert r.status is Status.NO_VALUE  # infinite without smoothing
    assert drift.psi_from_counts([0, 0], [5, 5]).status is Status.NO_VALUE
    assert drift.psi_from_counts([3, 0], [3, 0], smoothing=0).value == 0.0
    with pytest.raises(ValueError, match="reference is empty"):
        drift.psi([], [0.1])


@pytest.mark.parametrize("which", ["synthetic", "breast_cancer"])
def test_ks(which: str) -> None:
    if which == "synthetic":
        p, _, p_ref = synthetic()
        key = SYN
    else:
        p, _, p_ref = breast_cancer()
        key = BC
    r = drift.ks_2samp(p_ref, p)
    # source: scipy.stats.ks_2samp, computed here, and docs/methods.md §21 `ks_2samp`
    sp = stats.ks_2samp(p_ref, p)
    assert r.value == sp.statistic
    assert r.extra["p_value"] == sp.pvalue
    assert r.value == pytest.approx(ref(key, "ks_2samp")["D"], rel=1e-12)
    assert r.extra["p_value"] == pytest.approx(ref(key, "ks_2samp")["p"], rel=1e-9)


def test_ks_weighted_and_counts() -> None:
    p, _, p_ref = synthetic()
    w = np.random.default_rng(5).integers(1, 4, p.size).astype(float)
    rep = np.repeat(p, w.astype(int))
    r = drift.ks_2samp(p_ref, p, current_weight=w)
    # weighted D = D of repeated rows; p = scipy ks_2samp(method="asymp") on them
    sp = stats.ks_2samp(p_ref, rep, method="asymp")
    assert r.value == pytest.approx(sp.statistic, rel=1e-12)
    assert r.extra["p_value"] == pytest.approx(sp.pvalue, rel=1e-9)
    edges = drift.reference_bin_edges(p_ref, n_bins=50)
    lb = drift.ks_from_counts(drift.histogram(p_ref, edges), drift.histogram(p, edges))
    assert lb.value <= drift.ks_2samp(p_ref, p).value + 1e-12  # a lower bound (docs/methods.md §17.3)
    assert drift.ks_2samp([], [0.2]).status is Status.NO_VALUE


def test_js_distance() -> None:
    p, _, p_ref = synthetic()
    r = drift.js_distance(p_ref, p)
    # source: docs/methods.md §21 `js_distance_base2_ref_deciles` (scipy jensenshannon base 2)
    assert r.value == pytest.approx(ref(SYN, "js_distance_base2_ref_deciles"), rel=1e-12)
    edges = drift.reference_bin_edges(p_ref)
    a, b = drift.histogram(p_ref, edges), drift.histogram(p, edges)
    assert r.value == pytest.approx(jensenshannon(a / a.sum(), b / b.sum(), base=2), rel=1e-12)
    assert 0 < r.extra["null_95"] < r.value  # a real shift, above the multinomial null
    assert drift.js_distance(p_ref, p).extra["null_95"] == r.extra["null_95"]  # seeded
    pb, _, p_tr = breast_cancer()
    # source: docs/methods.md §21 breast cancer `js_distance_base2` (+0.5-smoothed decile bins)
    assert drift.js_distance(p_tr, pb, smoothing=0.5).value == pytest.approx(
        ref(BC, "js_distance_base2"), rel=1e-12)
    assert drift.js_distance_from_counts([5, 0], [5, 0]).value == 0.0
    assert drift.js_distance_from_counts([0, 0], [5, 0]).status is Status.NO_VALUE


def test_psi_null_level_is_the_chi_square_law_and_matches_a_simulation() -> None:
    rng = np.random.default_rng(11)
    share = np.full(10, 0.1)
    n = m = 2000
    ref_counts = rng.multinomial(n, share, size=4000)
    cur_counts = rng.multinomial(m, share, size=4000)
    extra = drift.psi_from_counts(ref_counts[0], cur_counts[0]).extra
    # Yurdakul (2018): under no shift PSI ≈ (1/n + 1/m) χ²_{B−1}; mean and 95 % point from scipy
    assert extra["null_expected"] == pytest.approx(stats.chi2.mean(9) * (1 / n + 1 / m), rel=1e-12)
    assert extra["null_95"] == pytest.approx(stats.chi2.ppf(0.95, 9) * (1 / n + 1 / m), rel=1e-12)
    # numpy multinomial draws of two samples from one law: the mean within 4 Monte Carlo SE, the
    # 95 % point between the simulated 93rd and 97th percentiles
    sims = np.array([drift.psi_from_counts(a, b).value for a, b in zip(ref_counts, cur_counts, strict=True)])
    assert abs(sims.mean() - extra["null_expected"]) <= 4 * sims.std() / math.sqrt(sims.size)
    assert np.quantile(sims, 0.93) <= extra["null_95"] <= np.quantile(sims, 0.97)
