"""Calibration intercept and slope (calibrant.stats.recalibration) against statsmodels."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from metrics_reference import DATASETS, dataset, ref
from scipy.special import logit

from calibrant.stats import recalibration as rc
from calibrant.stats.result import Status

EPS = np.finfo(np.float64).eps


def _x(p: np.ndarray) -> np.ndarray:
    return logit(np.clip(p, EPS, 1 - EPS))


@pytest.mark.parametrize("name", DATASETS)
def test_citl_matches_statsmodels_glm_offset(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    fit = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=_x(p)).fit(
        tol=1e-12)
    r = rc.calibration_intercept(y, p)
    # source: statsmodels GLM(offset=logit p) params/bse, computed here, and docs/methods.md §21
    assert r.value == pytest.approx(fit.params[0], rel=1e-8)
    assert r.se == pytest.approx(fit.bse[0], rel=1e-8)
    assert r.value == pytest.approx(ref(key, "citl_intercept"), rel=1e-6)
    assert r.se == pytest.approx(ref(key, "citl_intercept_se"), rel=1e-6)
    assert r.extra["p_value_wald"] == pytest.approx(ref(key, "citl_intercept_p_wald"), rel=1e-5)


@pytest.mark.parametrize("name", DATASETS)
def test_slope_matches_statsmodels_logit(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    fit = sm.Logit(y, sm.add_constant(_x(p))).fit(disp=0, tol=1e-12)
    r = rc.logistic_recalibration(y, p)
    # source: statsmodels Logit(y, [1, logit p]) params / bse, computed here
    assert r.slope.value == pytest.approx(fit.params[1], rel=1e-8)
    assert r.intercept.value == pytest.approx(fit.params[0], rel=1e-8)
    assert r.slope.se == pytest.approx(fit.bse[1], rel=1e-7)
    assert r.intercept.se == pytest.approx(fit.bse[0], rel=1e-7)
    assert r.cov_intercept_slope == pytest.approx(fit.cov_params()[0, 1], rel=1e-6)
    # source: docs/methods.md §21 `calibration_slope`, `calibration_intercept` and their SEs
    assert r.slope.value == pytest.approx(ref(key, "calibration_slope"), rel=1e-6)
    assert r.intercept.value == pytest.approx(ref(key, "calibration_intercept"), rel=1e-6)
    assert [r.intercept.se, r.slope.se] == pytest.approx(
        ref(key, "calibration_se_fisher_numpy"), rel=1e-6)
    assert rc.calibration_slope(y, p).value == r.slope.value
    assert rc.recalibration_intercept(y, p).value == r.intercept.value


@pytest.mark.parametrize("name", DATASETS)
def test_lr_tests_check_values(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    t = rc.recalibration_tests(y, p)
    # source: docs/methods.md §21 `cox_lr_test_a0_b1_2df`, `lr_test_citl_1df`,
    # `lr_test_slope_given_free_intercept_1df` (statsmodels llf, scipy chi2)
    for est, k in ((t.joint, "cox_lr_test_a0_b1_2df"), (t.calibration_in_the_large,
                   "lr_test_citl_1df"), (t.slope_given_intercept,
                   "lr_test_slope_given_free_intercept_1df")):
        assert est.value == pytest.approx(ref(key, k)["LR"], rel=1e-5, abs=1e-7)
        assert est.extra["p_value"] == pytest.approx(ref(key, k)["p"], rel=1e-5)


def test_breast_cancer_extreme_logits_counted() -> None:
    p, y = dataset("breast_cancer")
    r = rc.logistic_recalibration(y, p)
    n_ext = float(np.sum(np.abs(_x(p)) > 16))
    assert r.n_extreme_logits == n_ext
    if n_ext:
        assert r.slope_winsorised_16 is not None


def test_separated_window_is_insufficient_not_huge() -> None:
    ys = np.array([0, 0, 0, 1, 1, 1])
    ps = np.array([0.1, 0.2, 0.3, 0.6, 0.7, 0.8])
    # statsmodels returns huge params/bse here (docs/methods.md §21 `slope_fit_separated_window`)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = sm.Logit(ys, sm.add_constant(logit(ps))).fit(disp=0)
    assert fit.bse[1] > 1e4
    r = rc.logistic_recalibration(ys, ps, min_events=1)
    assert r.slope.status is Status.TOO_FEW_CASES
    assert r.slope.value is None
    assert "separated" in r.slope.reason
    # the default floor (20 events and 20 non-events, docs/methods.md §20) catches it first
    assert rc.calibration_slope(ys, ps).status is Status.TOO_FEW_CASES
    # large separated window: passes the floor, still insufficient
    big_p = np.r_[np.linspace(0.01, 0.4, 50), np.linspace(0.6, 0.99, 50)]
    big_y = np.r_[np.zeros(50), np.ones(50)]
    assert rc.calibration_slope(big_y, big_p).status is Status.TOO_FEW_CASES


def test_one_class_and_empty() -> None:
    for y, p in (([], []), ([0, 0, 0], [0.1, 0.2, 0.3]), ([1, 1], [0.5, 0.9])):
        assert rc.calibration_intercept(y, p).status is Status.NO_VALUE
        assert rc.calibration_slope(y, p).status is Status.NO_VALUE
        t = rc.recalibration_tests(y, p)
        assert t.joint.value is None


def test_from_logits_equals_proba_path() -> None:
    p, y = dataset("synthetic")
    a = rc.logistic_recalibration(y, p)
    b = rc.logistic_recalibration_from_logits(y, _x(p))
    assert a.slope.value == pytest.approx(b.slope.value, rel=1e-12)
    assert rc.calibration_intercept_from_logits(y, _x(p)).value == pytest.approx(
        rc.calibration_intercept(y, p).value, rel=1e-12)
    t = rc.recalibration_tests_from_logits(y, _x(p))
    assert t.joint.value == pytest.approx(rc.recalibration_tests(y, p).joint.value, rel=1e-10)
