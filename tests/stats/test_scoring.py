"""Log-loss and Brier score (calibrant.stats.scoring) against sklearn and docs/methods.md §21."""

from __future__ import annotations

import math

import numpy as np
import pytest
from metrics_reference import DATASETS, dataset, ref
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
    assert r.ci == pytest.approx((r.value - 1.959963984540054 * r.se,
                                  r.value + 1.959963984540054 * r.se), rel=1e-12)
    assert r.extra["eps"] == np.finfo(np.float64).eps


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
