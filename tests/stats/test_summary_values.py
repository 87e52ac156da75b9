"""Statistics from a summary vs the array version, reference libraries and docs/methods.md §21.

Exact quantities must agree to 1e-12 relative (docs/methods.md §21: "recomputed from
the bucket sums equal the per-observation values to within 1e-12"); binned ones
within the errors of docs/methods.md §2.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from metrics_reference import DATASETS, dataset, ref
from scipy.special import logit
from sklearn.calibration import calibration_curve
from sklearn.metrics import average_precision_score, brier_score_loss, roc_auc_score
from sklearn.metrics import log_loss as sk_log_loss

from calibrant.stats import calibration as cal
from calibrant.stats import scoring as sc
from calibrant.stats import summary_binned as sb
from calibrant.stats import summary_metrics as sm_
from calibrant.stats.decomposition import murphy_decomposition
from calibrant.stats.result import Status
from calibrant.stats.summary import EPS, F, Summary, bin_index

BUCKET_REF = json.loads(Path(__file__).with_name("summary_reference_values.json").read_text())


def _summary(name: str) -> tuple[np.ndarray, np.ndarray, Summary]:
    p, y = dataset(name)
    return p, y, Summary.from_arrays(p, y)


@pytest.mark.parametrize("name", DATASETS)
def test_exact_scores_equal_array_and_sklearn(name: str) -> None:
    p, y, s = _summary(name)
    key = DATASETS[name]
    ll = sm_.log_loss(s)
    # source: sklearn.metrics.log_loss(labels=[0, 1]) on the rows, computed here
    assert ll.value == pytest.approx(sk_log_loss(y, p, labels=[0, 1]), rel=1e-12)
    # source: array version calibrant.stats.scoring.log_loss on the same rows
    arr = sc.log_loss(y, p)
    assert ll.se == pytest.approx(arr.se, rel=1e-12)
    assert ll.extra["n_clipped"] == arr.extra["n_clipped"]
    assert ll.extra["n_confident_errors"] == arr.extra["n_confident_errors"]
    # source: docs/methods.md §21 `log_loss_se` (numpy formula)
    assert ll.se == pytest.approx(ref(key, "log_loss_se"), rel=1e-10)
    bs = sm_.brier(s)
    # source: sklearn.metrics.brier_score_loss, computed here
    assert bs.value == pytest.approx(brier_score_loss(y, p), rel=1e-12)
    assert bs.se == pytest.approx(sc.brier_score(y, p).se, rel=1e-10)
    # source: docs/methods.md §21 `brier_se`, `brier_expected_if_calibrated`
    assert bs.se == pytest.approx(ref(key, "brier_se"), rel=1e-10)
    assert sm_.expected_brier(s).value == pytest.approx(
        ref(key, "brier_expected_if_calibrated"), rel=1e-12)


@pytest.mark.parametrize("name", DATASETS)
def test_exact_calibration_tests_equal_array_version(name: str) -> None:
    p, y, s = _summary(name)
    key = DATASETS[name]
    # source: array versions in calibrant.stats (per-observation sums), and docs/methods.md §21
    z = sm_.spiegelhalter_z(s)
    assert z.value == pytest.approx(cal.spiegelhalter_z(y, p).value, rel=1e-12)
    assert z.value == pytest.approx(ref(key, "spiegelhalter_z"), rel=1e-10)
    zl = sm_.log_loss_calibration_z(s)
    assert zl.value == pytest.approx(sc.log_loss_calibration_z(y, p).value, rel=1e-12)
    assert zl.value == pytest.approx(ref(key, "log_loss_calibration_z"), rel=1e-10)
    e0 = sm_.expected_log_loss(s)
    assert e0.value == pytest.approx(ref(key, "log_loss_expected_if_calibrated"), rel=1e-12)
    assert e0.se == pytest.approx(ref(key, "log_loss_sd_if_calibrated"), rel=1e-12)
    oe = sm_.observed_expected(s)
    assert oe.value == pytest.approx(ref(key, "O_over_E"), rel=1e-12)
    assert oe.ci == pytest.approx(cal.observed_expected(y, p).ci, rel=1e-12)
    # docs/methods.md §21 `O_over_E_95ci` used z = 1.96, we use norm.ppf(0.975) = 1.959964
    assert oe.ci == pytest.approx(tuple(ref(key, "O_over_E_95ci")), rel=1e-5)
    assert oe.extra["z"] == pytest.approx(ref(key, "O_minus_E_z"), rel=1e-10)
    assert sm_.log_loss_skill(s).value == pytest.approx(ref(key, "log_loss_skill"), rel=1e-10)
    assert sm_.brier_skill_score(s).value == pytest.approx(ref(key, "brier_skill_score"),
                                                           rel=1e-10)


def test_sums_match_methods_bucket_check_values() -> None:
    # source: docs/methods.md §21 `*_from_sums` (width 0.05 buckets): exact, so any grid gives them
    _, _, s = _summary("synthetic")
    r = BUCKET_REF["width_0.05"]
    assert sm_.log_loss(s).value == pytest.approx(r["log_loss_from_sums"]["exact"], rel=1e-12)
    assert sm_.brier(s).value == pytest.approx(r["brier_from_sums"]["exact"], rel=1e-12)
    assert sm_.spiegelhalter_z(s).value == pytest.approx(
        r["spiegelhalter_z_from_sums"]["exact"], rel=1e-12)
    assert sm_.log_loss_calibration_z(s).value == pytest.approx(
        r["log_loss_z_from_sums"]["exact"], rel=1e-12)


@pytest.mark.parametrize("name", DATASETS)
def test_murphy_and_uniform_ece_exact_on_aligned_bins(name: str) -> None:
    p, y, s = _summary(name)
    key = DATASETS[name]
    d = sb.murphy_decomposition(s)
    # source: docs/methods.md §21 `murphy_10bins` (numpy, bins [k/10, (k+1)/10))
    m = ref(key, "murphy_10bins")
    for attr, k in (("reliability", "REL"), ("resolution", "RES"), ("uncertainty", "UNC"),
                    ("within_bin_variance", "WBV"), ("within_bin_covariance", "WBC")):
        assert getattr(d, attr) == pytest.approx(m[k], rel=1e-9, abs=1e-15)
    # source: array version murphy_decomposition (closed="left") on the rows
    a = murphy_decomposition(y, p)
    assert d.reliability == pytest.approx(a.reliability, rel=1e-10)
    e = sb.ece(s)
    # source: docs/methods.md §21 `ece_uniform_10`, `mce_uniform_10` (sklearn calibration_curve)
    assert e.value == pytest.approx(ref(key, "ece_uniform_10"), rel=1e-10)
    assert e.extra["mce"] == pytest.approx(ref(key, "mce_uniform_10"), rel=1e-10)


@pytest.mark.parametrize("name", DATASETS)
def test_reliability_diagram_matches_sklearn_calibration_curve(name: str) -> None:
    p, y, s = _summary(name)
    rd = sb.reliability_diagram(s, n_bins=10)
    full = [b for b in rd.bins if b.count > 0]
    # source: sklearn.calibration.calibration_curve(strategy="uniform"), computed here
    prob_true, prob_pred = calibration_curve(y, p, n_bins=10, strategy="uniform")
    np.testing.assert_allclose([b.observed_rate for b in full], prob_true, rtol=1e-10)
    np.testing.assert_allclose([b.mean_predicted for b in full], prob_pred, rtol=1e-10)


def test_quantile_ece_within_snapping_error() -> None:
    _, _, s = _summary("synthetic")
    e = sb.ece(s, strategy="quantile")
    # source: docs/methods.md §21 `ece_quantile_10` (sklearn); snapped edges move each edge by at
    # most one fine bin (< 1 % of the rows here), tolerance chosen for that
    assert e.value == pytest.approx(ref("synthetic", "ece_quantile_10"), abs=5e-3)


@pytest.mark.parametrize("name", DATASETS)
def test_auc_bins_as_ties(name: str) -> None:
    p, y, s = _summary(name)
    a = sb.auc(s)
    exact = roc_auc_score(y, p)  # source: sklearn.metrics.roc_auc_score on the rows
    assert abs(a.value - exact) <= 5e-4
    assert abs(a.value - exact) <= a.extra["binning_error_bound"] + 1e-15
    # source: sklearn roc_auc_score with the fine-bin id as a tied score: same definition
    ids = bin_index(p)
    assert a.value == pytest.approx(roc_auc_score(y, ids), rel=1e-12)
    ap = sb.average_precision(s)
    assert ap.value == pytest.approx(average_precision_score(y, ids), rel=1e-12)
    # source: sklearn average_precision_score on the rows; no bound is derived (docs/methods.md
    # §2), tolerance 5e-3 = ten times the AUC tolerance
    assert ap.value == pytest.approx(average_precision_score(y, p), abs=5e-3)


def test_auc_delong_se_near_row_level_value() -> None:
    _, _, s = _summary("synthetic")
    a = sb.auc(s)
    # source: docs/methods.md §21 `auc_delong_se` (DeLong formula on rows); bins as ties shift it
    # by the same order as the AUC (1e-4 relative to 0.7): allow 1 %
    assert a.se == pytest.approx(ref("synthetic", "auc_delong_se"), rel=1e-2)
    # source: docs/methods.md §21 `auc_95ci_logit`, same tolerance
    assert a.ci == pytest.approx(tuple(ref("synthetic", "auc_95ci_logit")), rel=1e-2)


def _glm_on_own_bins(s: Summary) -> tuple[np.ndarray, np.ndarray, float]:
    """statsmodels GLM Binomial with freq_weights on the summary's own bins."""
    v = s.labeled(False)
    n1, n0 = v.pos[:, F["n"]], v.neg[:, F["n"]]
    with np.errstate(invalid="ignore", divide="ignore"):  # empty cells are dropped below
        x1, x0 = v.pos[:, F["sx"]] / n1, v.neg[:, F["sx"]] / n0  # each class at its own mean logit
    y = np.r_[np.ones(n1.size), np.zeros(n0.size)]
    x, w = np.r_[x1, x0], np.r_[n1, n0]
    keep = w > 0
    fam = sm.families.Binomial()
    fit = sm.GLM(y[keep], sm.add_constant(x[keep]), family=fam, freq_weights=w[keep]).fit()
    citl = sm.GLM(y[keep], np.ones((keep.sum(), 1)), family=fam, offset=x[keep],
                  freq_weights=w[keep]).fit()
    return fit.params, fit.bse, float(citl.params[0])


def test_calibration_fits_on_bins() -> None:
    p, y, s = _summary("synthetic")
    rec = sb.logistic_recalibration(s)
    citl = sb.calibration_intercept(s)
    params, bse, citl_sm = _glm_on_own_bins(s)
    # source: statsmodels GLM(freq_weights) on the same bins, computed here
    assert rec.slope.value == pytest.approx(params[1], rel=1e-7)
    assert rec.intercept.value == pytest.approx(params[0], rel=1e-7)
    assert rec.slope.se == pytest.approx(bse[1], rel=1e-6)
    assert citl.value == pytest.approx(citl_sm, rel=1e-7)
    # source: statsmodels Logit on the raw rows; docs/methods.md §2: error O(w²). With each class
    # at its own mean logit we measured 1.1e-4 on slope and intercept and 1.5e-5 on CITL here.
    x = logit(np.clip(p, EPS, 1 - EPS))
    raw = sm.Logit(y, sm.add_constant(x)).fit(disp=0)
    assert abs(rec.slope.value - raw.params[1]) <= 3e-4
    assert abs(rec.intercept.value - raw.params[0]) <= 3e-4
    raw_citl = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=x).fit()
    assert abs(citl.value - raw_citl.params[0]) <= 1e-4
    # source: docs/methods.md §21 `calibration_intercept_slope_from_histogram` (plain 0.05 grid;
    # ours adds the logit(j/20) edges, so the two binned fits differ by O(w²) as well)
    hist = BUCKET_REF["width_0.05"]["calibration_intercept_slope_from_histogram"]["value"]
    assert rec.slope.value == pytest.approx(hist[1], abs=1e-3)
    assert rec.intercept.value == pytest.approx(hist[0], abs=1e-3)


def test_ici_from_bin_means_near_row_lowess() -> None:
    _, _, s = _summary("synthetic")
    r = sb.integrated_calibration_index(s)
    # source: docs/methods.md §21 `ici_lowess_local_linear` (statsmodels lowess frac=0.75, it=0 on
    # rows); docs/methods.md §2 says "small if w ≪ span, not exact": tolerance 2e-3 chosen
    assert r.ici == pytest.approx(ref("synthetic", "ici_lowess_local_linear")["ICI"], abs=2e-3)
    assert r.emax == pytest.approx(ref("synthetic", "ici_lowess_local_linear")["Emax"], abs=5e-3)


def test_breast_cancer_ici_insufficient() -> None:
    _, _, s = _summary("breast_cancer")
    # docs/methods.md §20 floor: 200 events and 200 non-events (the split has 107 / 64)
    assert sb.integrated_calibration_index(s).status is Status.TOO_FEW_CASES


def test_all_metrics_keys_and_intervals() -> None:
    p, y, s = _summary("synthetic")
    ref_s = Summary.from_arrays(dataset("synthetic")[0][::-1], np.full(p.size, -1))
    out = sm_.all_metrics(s, ref_s)
    assert set(out) == {
        "n_predictions", "n_labeled", "label_coverage", "mean_probability", "observed_rate",
        "oe_ratio", "log_loss", "log_loss_expected", "brier", "brier_reliability",
        "brier_resolution", "brier_uncertainty", "calibration_intercept", "calibration_slope",
        "calibration_slope_robust", "n_clipped", "n_confident_errors", "spiegelhalter_z", "ece",
        "auc", "psi"}
    assert all(e.measured for e in out.values())
    for key in ("mean_probability", "observed_rate", "oe_ratio", "log_loss", "brier",
                "calibration_intercept", "calibration_slope", "calibration_slope_robust", "auc"):
        assert out[key].ci is not None
        assert out[key].ci[0] < out[key].value < out[key].ci[1]
    # the same rows in reverse order: no drift at all (source: definition of PSI, = 0 iff a = e)
    assert out["psi"].value == pytest.approx(0.0, abs=1e-15)
    assert out["observed_rate"].value == pytest.approx(y.mean(), rel=1e-15)
