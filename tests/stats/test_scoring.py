"""Log-loss and Brier score (calibrant.stats.scoring) against sklearn and docs/methods.md §21."""

from __future__ import annotations

import math

import numpy as np
import pytest
from metrics_reference import DATASETS, dataset, ref
from scipy import optimize, stats
from scipy.special import expit, logit
from sklearn.metrics import brier_score_loss
from sklearn.metrics import log_loss as sk_log_loss

from calibrant.stats import scoring as sc
from calibrant.stats.result import Status


@pytest.mark.parametrize("name", DATASETS)
def test_log_loss_matches_sklearn_and_check_values(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    r = sc.log_loss(y, p)
    # source: sklearn.metrics.log_loss(y, p, labels=[0, 1]), computed here
    assert r.value == pytest.approx(sk_log_loss(y, p, labels=[0, 1]), rel=1e-12)
    # source: docs/methods.md §21 `log_loss` (sklearn 1.9.1) and `log_loss_se` (numpy formula)
    assert r.value == pytest.approx(ref(key, "log_loss"), rel=1e-12)
    assert r.se == pytest.approx(ref(key, "log_loss_se"), rel=1e-10)
    lt = -(y * np.log(p) + (1 - y) * np.log1p(-p))  # p of the datasets lies inside (ε, 1 − ε)
    assert r.ci == pytest.approx(hall_interval(lt), rel=1e-9)
    assert r.extra["interval"] == "hall_skew_corrected_95"
    assert r.extra["eps"] == np.finfo(np.float64).eps


def hall_interval(values: np.ndarray) -> tuple[float, float]:
    """Hall (1992, JRSS B 54:221–228) interval for the mean, solved here by root finding on the
    forward transformation g(t) = t + a t² + a² t³/3 + b, a = γ/(3√n), b = γ/(6√n), with the
    sample skewness γ of scipy.stats.skew and T = √n (x̄ − μ)/s (s: numpy std, ddof 1)."""
    n = values.size
    mean, sd = float(values.mean()), float(values.std(ddof=1))
    gamma = float(stats.skew(values))
    a, b = gamma / (3 * math.sqrt(n)), gamma / (6 * math.sqrt(n))
    z = float(stats.norm.ppf(0.975))

    def g(t: float) -> float:
        return t + a * t * t + a * a * t**3 / 3 + b

    t_hi = optimize.brentq(lambda t: g(t) - z, -50, 50)
    t_lo = optimize.brentq(lambda t: g(t) + z, -50, 50)
    se = sd / math.sqrt(n)
    return (mean - se * t_hi, mean - se * t_lo)


def test_hall_interval_is_the_normal_one_without_skew_and_leans_right_with_it() -> None:
    # symmetric scores: γ = 0 and Hall's interval is x̄ ± 1.96 s/√n (Hall 1992)
    sym = np.array([0.0, 1.0, 2.0, 3.0, 4.0] * 20)
    r = sc.brier_from_moments(sym.size, float(sym.sum()), float((sym**2).sum()),
                              M3=float(((sym - sym.mean()) ** 3).sum()))
    half = float(stats.norm.ppf(0.975)) * sym.std(ddof=1) / math.sqrt(sym.size)
    assert r.ci == pytest.approx((sym.mean() - half, sym.mean() + half), rel=1e-12)
    # right-skewed scores: the upper half-width exceeds the lower one (the interval of a mean of
    # rare large losses), and equals the root-found reference
    rng = np.random.default_rng(5)
    skewed = rng.exponential(1.0, 60) ** 2
    m3 = float(((skewed - skewed.mean()) ** 3).sum())
    r = sc.log_loss_from_sums(skewed.size, float(skewed.sum()), float((skewed**2).sum()), M3=m3)
    assert r.ci == pytest.approx(hall_interval(skewed), rel=1e-9)
    assert r.ci[1] - r.value > r.value - r.ci[0]


@pytest.mark.parametrize("name", DATASETS)
def test_expected_log_loss_and_z(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    e0 = sc.expected_log_loss(None, p)
    # source: docs/methods.md §21 `log_loss_expected_if_calibrated` / `log_loss_sd_if_calibrated`
    assert e0.value == pytest.approx(ref(key, "log_loss_expected_if_calibrated"), rel=1e-10)
    assert e0.se == pytest.approx(ref(key, "log_loss_sd_if_calibrated"), rel=1e-10)
    z = sc.log_loss_calibration_z(y, p)
    # source: docs/methods.md §21 `log_loss_calibration_z` and its scipy.stats.norm p-value
    assert z.value == pytest.approx(ref(key, "log_loss_calibration_z"), rel=1e-9)
    assert z.extra["p_value"] == pytest.approx(ref(key, "log_loss_calibration_p_two_sided"),
                                               rel=1e-7)
    # source: the weighted-residual identity of docs/methods.md §3, computed here
    x = logit(np.clip(p, 2.220446049250313e-16, 1 - 2.220446049250313e-16))
    alt = -np.sum(x * (y - p)) / np.sqrt(np.sum(x**2 * p * (1 - p)))
    assert z.value == pytest.approx(alt, rel=1e-9)


@pytest.mark.parametrize("name", DATASETS)
def test_log_loss_skill(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    s = sc.log_loss_skill(y, p)
    # source: docs/methods.md §21 `log_loss_skill`; base rate = sklearn log_loss(y, full(ybar))
    assert s.value == pytest.approx(ref(key, "log_loss_skill"), rel=1e-10)
    base = sk_log_loss(y, np.full(y.size, y.mean()), labels=[0, 1])
    assert s.extra["log_loss_reference"] == pytest.approx(base, rel=1e-12)
    assert s.extra["reference"] == "in_window_prevalence"
    # fixed pi0: formula -[ybar ln pi0 + (1 - ybar) ln(1 - pi0)] = sklearn with constant pi0
    f = sc.log_loss_skill(y, p, pi0=0.3)
    base0 = sk_log_loss(y, np.full(y.size, 0.3), labels=[0, 1])
    assert f.value == pytest.approx(1 - sk_log_loss(y, p, labels=[0, 1]) / base0, rel=1e-12)
    assert f.extra["reference"] == "fixed_pi0"


@pytest.mark.parametrize("name", DATASETS)
def test_brier_matches_sklearn_and_check_values(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    b = sc.brier_score(y, p)
    # source: sklearn.metrics.brier_score_loss, computed here, and docs/methods.md §21 `brier`
    assert b.value == pytest.approx(brier_score_loss(y, p), rel=1e-12)
    assert b.value == pytest.approx(ref(key, "brier"), rel=1e-12)
    assert b.se == pytest.approx(ref(key, "brier_se"), rel=1e-10)
    assert b.ci == pytest.approx(hall_interval((p - y) ** 2), rel=1e-9)  # Hall (1992), root-found here
    # source: docs/methods.md §21 `brier_expected_if_calibrated` (numpy mean p(1 - p))
    assert b.extra["expected_if_calibrated"] == pytest.approx(
        ref(key, "brier_expected_if_calibrated"), rel=1e-12)
    assert sc.expected_brier(None, p).value == pytest.approx(
        ref(key, "brier_expected_if_calibrated"), rel=1e-12)
    bss = sc.brier_skill_score(y, p)
    # source: docs/methods.md §21 `brier_skill_score`, base = sklearn brier_score_loss(y, full(ybar))
    assert bss.value == pytest.approx(ref(key, "brier_skill_score"), rel=1e-10)
    assert bss.extra["brier_reference"] == pytest.approx(
        brier_score_loss(y, np.full(y.size, y.mean())), rel=1e-12)
    # fixed pi0: BS of the constant forecast pi0 (sklearn, computed here)
    f = sc.brier_skill_score(y, p, pi0=0.25)
    assert f.value == pytest.approx(
        1 - brier_score_loss(y, p) / brier_score_loss(y, np.full(y.size, 0.25)), rel=1e-12)


def test_edge_p0_for_event_float64_and_float32() -> None:
    y = np.array([1, 0])
    p = np.array([0.0, 0.0])
    # source: docs/methods.md §21 edge_cases `log_loss_p0_for_positive_float64` (sklearn 1.9.1)
    expected = ref("edge_cases", "log_loss_p0_for_positive_float64")
    assert sc.log_loss(y, p).value == pytest.approx(expected, rel=1e-14)
    # float32 input is cast to float64: the float64 answer, not sklearn's float32 7.97119
    r32 = sc.log_loss(y, p.astype(np.float32))
    assert r32.value == pytest.approx(expected, rel=1e-14)
    assert r32.value != pytest.approx(ref("edge_cases", "log_loss_p0_for_positive_float32"))
    assert r32.extra["n_clipped"] == 2
    assert r32.extra["n_confident_errors"] == 1
    # per-row cap -ln(eps): docs/methods.md §21 `neg_log_eps`
    one = sc.log_loss([1], [0.0])
    assert one.value == pytest.approx(ref("edge_cases", "neg_log_eps")["float64"], rel=1e-14)
    assert one.se is None  # n = 1: no standard error


def test_edge_one_class_window() -> None:
    y = np.zeros(5, int)
    p = np.array([0.1, 0.2, 0.3, 0.4, 0.5])
    beh = ref("edge_cases", "all_negative_window_behaviour")
    # source: sklearn 1.9.1 log_loss(labels=[0, 1]) and brier_score_loss on y = 0 (docs/methods.md §21)
    assert sc.log_loss(y, p).value == pytest.approx(beh["log_loss_labels01"]["result"], rel=1e-12)
    assert sc.brier_score(y, p).value == pytest.approx(beh["brier_score_loss"]["result"],
                                                       rel=1e-12)
    for r in (sc.log_loss_skill(y, p), sc.brier_skill_score(y, p)):
        assert r.status is Status.NO_VALUE
        assert r.value is None
        assert r.reason


def test_edge_empty_and_constant_half() -> None:
    for f in (sc.log_loss, sc.brier_score, sc.log_loss_skill, sc.brier_skill_score,
              sc.log_loss_calibration_z):
        r = f([], [])
        assert r.status is Status.NO_VALUE
        assert r.value is None
    half = np.full(10, 0.5)
    y = np.array([0, 1] * 5)
    z = sc.log_loss_calibration_z(y, half)
    assert z.status is Status.NO_VALUE  # Var0 = 0 when every p is 1/2
    ll = sc.log_loss(y, half)
    assert ll.value == pytest.approx(math.log(2), rel=1e-15)
    assert ll.se == 0.0  # constant loss: the variance is clamped at 0, never negative/NaN
    assert sc.expected_brier(y, half).value == 0.25


def test_invalid_input_raises() -> None:
    with pytest.raises(ValueError, match="y_true"):
        sc.log_loss([0, 2], [0.1, 0.2])
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        sc.log_loss([0, 1], [0.1, 1.2])
    with pytest.raises(ValueError, match="NaN"):
        sc.brier_score([0, 1], [0.1, np.nan])
    with pytest.raises(ValueError, match="length"):
        sc.brier_score([0, 1], [0.1])
    with pytest.raises(ValueError, match="non-negative"):
        sc.brier_score([0, 1], [0.1, 0.2], sample_weight=[1, -1])
    with pytest.raises(ValueError, match="pi0"):
        sc.log_loss_skill([0, 1], [0.1, 0.2], pi0=2.0)


def test_from_sums_agree_with_power_sums() -> None:
    p, y = dataset("synthetic")
    pos = y == 1
    sse, sse2 = sc.squared_error_sums_from_power_sums(
        pos.sum(), p[pos].sum(), (p[pos] ** 2).sum(), (p[pos] ** 3).sum(), (p**2).sum(),
        (p**4).sum())
    b = sc.brier_from_moments(y.size, sse, sse2)
    # source: docs/methods.md §21 `brier` and `brier_se` (the summary path's formula, [D])
    assert b.value == pytest.approx(ref("synthetic", "brier"), rel=1e-12)
    assert b.se == pytest.approx(ref("synthetic", "brier_se"), rel=1e-9)


def test_log_loss_with_weights_matches_sklearn() -> None:
    p, y = dataset("synthetic")
    w = np.random.default_rng(1).integers(0, 4, y.size).astype(float)
    # source: sklearn.metrics.log_loss / brier_score_loss with sample_weight, computed here
    assert sc.log_loss(y, p, sample_weight=w).value == pytest.approx(
        sk_log_loss(y, p, sample_weight=w, labels=[0, 1]), rel=1e-12)
    assert sc.brier_score(y, p, sample_weight=w).value == pytest.approx(
        brier_score_loss(y, p, sample_weight=w), rel=1e-12)


def test_logit_input_not_needed_for_extremes() -> None:
    # p within float64 of 1 for an event: clipped at 1 - eps, loss ~ eps, never NaN
    r = sc.log_loss([1, 0], [1.0, float(expit(-40))])
    assert r.measured
    assert r.value < 1e-15
