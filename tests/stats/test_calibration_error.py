"""ECE / MCE and ICI (calibrant.stats.calibration_error) against sklearn, statsmodels, docs/methods.md §21."""

from __future__ import annotations

import math

import numpy as np
import pytest
from metrics_reference import DATASETS, dataset, ref, synthetic
from scipy import stats as sps
from sklearn.calibration import calibration_curve
from statsmodels.nonparametric.smoothers_lowess import lowess as sm_lowess

from calibrant.stats import calibration_error as ce
from calibrant.stats.result import Status


def _sk_ece(y: np.ndarray, p: np.ndarray, strategy: str) -> tuple[float, float]:
    pt, pp = calibration_curve(y, p, n_bins=10, strategy=strategy)
    bins = np.linspace(0, 1, 11) if strategy == "uniform" else np.percentile(
        p, np.linspace(0, 100, 11))
    cnt = np.bincount(np.searchsorted(bins[1:-1], p), minlength=10)
    return float(np.sum(cnt[cnt > 0] * np.abs(pt - pp)) / p.size), float(np.max(np.abs(pt - pp)))


@pytest.mark.parametrize("name", DATASETS)
@pytest.mark.parametrize("strategy", ["uniform", "quantile"])
def test_ece_mce(name: str, strategy: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    e = ce.expected_calibration_error(y, p, strategy=strategy)
    m = ce.maximum_calibration_error(y, p, strategy=strategy)
    sk_e, sk_m = _sk_ece(y, p, strategy)
    # source: sklearn.calibration.calibration_curve + same-rule counts, computed here
    assert e.value == pytest.approx(sk_e, rel=1e-12)
    assert m.value == pytest.approx(sk_m, rel=1e-12)
    # source: docs/methods.md §21 `ece_<strategy>_10`, `mce_<strategy>_10` (sklearn 1.9.1)
    assert e.value == pytest.approx(ref(key, f"ece_{strategy}_10"), rel=1e-12)
    assert m.value == pytest.approx(ref(key, f"mce_{strategy}_10"), rel=1e-12)
    assert e.extra["variant"] == "positive_class"


def test_ece_edge_convention_rounded_scores() -> None:
    p, y, _ = synthetic()
    pr = np.round(p, 2)
    r = ref("edge_cases", "ece_edge_convention_rounded_scores")
    # source: docs/methods.md §21 `ece_edge_convention_rounded_scores` (numpy, both closed sides)
    right = ce.expected_calibration_error(y, pr, closed="right").value
    left = ce.expected_calibration_error(y, pr, closed="left").value
    assert right == pytest.approx(r["right_closed_(sklearn)"], rel=1e-12)
    assert left == pytest.approx(r["left_closed_(np.digitize)"], rel=1e-12)
    assert right == pytest.approx(_sk_ece(y, pr, "uniform")[0], rel=1e-12)


def test_ece_edges() -> None:
    assert ce.expected_calibration_error([], []).status is Status.NO_VALUE
    assert ce.maximum_calibration_error([], []).status is Status.NO_VALUE
    one = ce.expected_calibration_error([0, 0], [0.1, 0.3])
    assert one.value == pytest.approx(0.2, rel=1e-12)
    with pytest.raises(ValueError, match="strategy"):
        ce.expected_calibration_error([0], [0.1], strategy="kmeans")


@pytest.mark.parametrize("frac", [0.75, 0.3])
def test_lowess_matches_statsmodels(frac: float) -> None:
    p, y = dataset("synthetic")
    ours = ce.lowess(p, y, frac=frac)
    # source: statsmodels lowess(y, p, frac, it=0, return_sorted=False), computed here
    theirs = sm_lowess(y, p, frac=frac, it=0, return_sorted=False)
    np.testing.assert_allclose(ours, theirs, rtol=1e-9, atol=1e-12)
    # ties in x: rounded scores
    pr = np.round(p, 2)
    np.testing.assert_allclose(ce.lowess(pr, y, frac=frac),
                               sm_lowess(y, pr, frac=frac, it=0, return_sorted=False),
                               rtol=1e-9, atol=1e-12)


def test_ici_check_values() -> None:
    p, y = dataset("synthetic")
    r = ce.integrated_calibration_index(y, p)
    v = ref("synthetic", "ici_lowess_local_linear")
    # source: docs/methods.md §21 `ici_lowess_local_linear` (statsmodels 0.15 lowess frac=0.75, it=0)
    assert r.ici == pytest.approx(v["ICI"], rel=1e-9)
    assert r.e50 == pytest.approx(v["E50"], rel=1e-9)
    assert r.e90 == pytest.approx(v["E90"], rel=1e-9)
    assert r.emax == pytest.approx(v["Emax"], rel=1e-9)


def test_ici_floor() -> None:
    p, y = dataset("breast_cancer")  # 107 events, 64 non-events < 200
    r = ce.integrated_calibration_index(y, p)
    assert r.status is Status.TOO_FEW_CASES
    assert r.ici is None
    forced = ce.integrated_calibration_index(y, p, min_events=0)
    v = ref("breast_cancer_test", "ici_lowess_local_linear")
    # source: docs/methods.md §21 breast-cancer `ici_lowess_local_linear` (statsmodels)
    assert forced.ici == pytest.approx(v["ICI"], rel=1e-8)
    assert forced.emax == pytest.approx(v["Emax"], rel=1e-8)
    assert ce.integrated_calibration_index([0, 0], [0.1, 0.2]).status is Status.NO_VALUE
    assert ce.integrated_calibration_index([], []).status is Status.NO_VALUE


def test_weighted_lowess_equals_repeated_rows() -> None:
    rng = np.random.default_rng(3)
    x = rng.random(60)
    y = (rng.random(60) < x).astype(float)
    w = rng.integers(1, 4, 60).astype(float)
    rep = np.repeat(np.arange(60), w.astype(int))
    np.testing.assert_allclose(ce.lowess(x, y, sample_weight=w),
                               ce.lowess(x[rep], y[rep])[np.searchsorted(rep, np.arange(60))],
                               rtol=1e-9, atol=1e-12)


def test_ece_null_level_of_one_bin_against_scipy() -> None:
    # a small bin (n f(1 − f) = 4.5 < 30): the exact binomial mean |O − μ|, from scipy's pmf
    n, f = 50, 0.1
    k = np.arange(n + 1)
    mad = float(sps.binom.pmf(k, n, f) @ np.abs(k - n * f))
    mean, upper = ce.ece_null_from_bin_sums([n], [n * f])
    assert mean == pytest.approx(mad / n, rel=1e-10)
    # a large bin (n f(1 − f) = 900): the half-normal law of |O − μ|, scipy.stats.halfnorm;
    # the gamma law's 95 % point is 1.975σ against the half-normal's 1.960σ (0.8 % high)
    n, f = 3600, 0.5
    sigma = math.sqrt(n * f * (1 - f))
    mean, upper = ce.ece_null_from_bin_sums([n], [n * f])
    assert mean == pytest.approx(sps.halfnorm.mean() * sigma / n, rel=1e-12)
    assert upper == pytest.approx(sps.halfnorm.ppf(0.95) * sigma / n, rel=0.01)
    assert ce.ece_null_from_bin_sums([0, 0], [0.0, 0.0]) is None
