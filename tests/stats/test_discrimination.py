"""ROC AUC and average precision (calibrant.stats.discrimination) against sklearn and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from metrics_reference import DATASETS, dataset, ref, synthetic
from scipy import stats
from sklearn.metrics import average_precision_score, roc_auc_score

from calibrant.stats import discrimination as disc
from calibrant.stats.result import Status


@pytest.mark.parametrize("name", DATASETS)
def test_auc_and_delong(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    r = disc.roc_auc(y, p)
    # source: sklearn.metrics.roc_auc_score and scipy.stats.mannwhitneyu U/(n1 n0), computed here
    assert r.value == pytest.approx(roc_auc_score(y, p), rel=1e-12)
    u = stats.mannwhitneyu(p[y == 1], p[y == 0]).statistic
    assert r.value == pytest.approx(u / ((y == 1).sum() * (y == 0).sum()), rel=1e-12)
    # source: docs/methods.md §21 `auc_delong_se` (numpy DeLong via midranks), `auc_95ci_logit`
    assert r.se == pytest.approx(ref(key, "auc_delong_se"), rel=1e-9)
    # the check interval uses z = 1.96 (we use 1.959964)
    assert r.ci == pytest.approx(tuple(ref(key, "auc_95ci_logit")), rel=1e-5)
    assert [r.extra["ci_wald_low"], r.extra["ci_wald_high"]] == pytest.approx(
        ref(key, "auc_95ci_wald"), rel=1e-5)


def test_auc_ties_count_half() -> None:
    p, y, _ = synthetic()
    pr = np.round(p, 2)
    v = ref("edge_cases", "auc_rounded_scores")
    # source: docs/methods.md §21 `auc_rounded_scores` (sklearn 1.9.1 = midranks 0.72127)
    assert disc.roc_auc(y, pr).value == pytest.approx(v["sklearn"], rel=1e-12)
    assert disc.roc_auc(y, pr).value == pytest.approx(roc_auc_score(y, pr), rel=1e-12)


def test_auc_weighted_matches_sklearn() -> None:
    p, y = dataset("synthetic")
    w = np.random.default_rng(2).integers(0, 5, y.size).astype(float)
    pr = np.round(p, 2)
    # source: sklearn roc_auc_score(sample_weight=...) (weighted Mann–Whitney), computed here
    assert disc.roc_auc(y, pr, sample_weight=w).value == pytest.approx(
        roc_auc_score(y, pr, sample_weight=w), rel=1e-12)


def test_auc_edges() -> None:
    r = disc.roc_auc([0, 0, 0], [0.1, 0.2, 0.3])
    assert r.status is Status.NO_VALUE  # never 0.5
    assert r.value is None
    assert disc.roc_auc([], []).status is Status.NO_VALUE
    small = disc.roc_auc([0, 1, 0, 1], [0.1, 0.9, 0.3, 0.4])
    assert small.measured
    assert small.value == 1.0
    assert small.ci is None  # interval withheld below 20 per class
    perfect = disc.roc_auc(np.r_[np.zeros(30), np.ones(30)], np.linspace(0.01, 0.99, 60))
    assert perfect.value == 1.0
    assert perfect.ci is None  # logit interval undefined at AUC = 1


@pytest.mark.parametrize("name", DATASETS)
def test_average_precision(name: str) -> None:
    p, y = dataset(name)
    key = DATASETS[name]
    r = disc.average_precision(y, p)
    # source: sklearn.metrics.average_precision_score, computed here, and docs/methods.md §21
    assert r.value == pytest.approx(average_precision_score(y, p), rel=1e-12)
    assert r.value == pytest.approx(ref(key, "average_precision"), rel=1e-12)
    assert r.extra["no_skill"] == pytest.approx(ref(key, "average_precision_no_skill"), rel=1e-12)


def test_average_precision_ties_and_weights() -> None:
    p, y, _ = synthetic()
    pr = np.round(p, 2)
    # source: docs/methods.md §21 `average_precision_rounded_scores` (sklearn 1.9.1)
    assert disc.average_precision(y, pr).value == pytest.approx(
        ref("edge_cases", "average_precision_rounded_scores")["sklearn"], rel=1e-12)
    w = np.random.default_rng(4).integers(0, 4, y.size).astype(float)
    assert disc.average_precision(y, pr, sample_weight=w).value == pytest.approx(
        average_precision_score(y, pr, sample_weight=w), rel=1e-12)


def test_average_precision_no_events_undefined() -> None:
    # sklearn 1.9.1 returns 0.0 here (docs/methods.md §21 `all_negative_window_behaviour`); we don't
    assert ref("edge_cases", "all_negative_window_behaviour")[
        "average_precision_score"]["result"] == 0
    r = disc.average_precision([0, 0, 0], [0.1, 0.2, 0.3])
    assert r.status is Status.NO_VALUE
    assert r.value is None
