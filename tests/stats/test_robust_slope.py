"""The winsorised (robust) calibration slope and the clipped / confident-error counts.

References: statsmodels ``Logit`` and ``GLM(Binomial, freq_weights)`` on logits the
test clips itself at ``numpy.quantile`` percentiles; numpy counting on the raw arrays.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from metrics_reference import DATASETS, dataset
from scipy.special import expit, logit
from scipy.stats import norm

from calibrant.stats import recalibration as rc
from calibrant.stats import summary_metrics as sm_
from calibrant.stats.result import Status
from calibrant.stats.summary import NEGATIVE, POSITIVE, UNLABELED, Summary

EPS = np.finfo(np.float64).eps
TAIL = 0.025
# the fine grid of docs/methods.md §2, rebuilt here from its definition
FINE_EDGES = np.union1d(expit(np.linspace(-16.0, 16.0, 641)), np.arange(1, 20) / 20.0)


def _x(p: np.ndarray) -> np.ndarray:
    return logit(np.clip(p, EPS, 1 - EPS))


def _beta_week(n: int, seed: int, true_slope: float = 1.0, extreme: bool = True
               ) -> tuple[np.ndarray, np.ndarray]:
    """n Beta(2, 8) predictions, outcomes drawn with true logit = true_slope · logit(p),
    plus (``extreme``) one case p = 1e-9 that had the event."""
    rng = np.random.default_rng(seed)
    p = rng.beta(2.0, 8.0, n)
    y = (rng.random(n) < expit(true_slope * logit(p))).astype(int)
    if extreme:
        p, y = np.r_[p, 1e-9], np.r_[y, 1]
    return p, y


def _statsmodels_winsorised(x: np.ndarray, y: np.ndarray):
    lo, hi = np.quantile(x, [TAIL, 1 - TAIL])  # numpy 'linear', the documented rule
    fit = sm.Logit(y, sm.add_constant(np.clip(x, lo, hi))).fit(disp=0, tol=1e-12)
    return fit, lo, hi


CASES = [("beta_300_extreme", 300, 11), ("beta_2000_extreme", 2000, 12), ("beta_500_clean", 500, 13)]


def _data(name: str) -> tuple[np.ndarray, np.ndarray]:
    if name in DATASETS:
        return dataset(name)
    n, seed = {c[0]: c[1:] for c in CASES}[name]
    return _beta_week(n, seed, extreme="extreme" in name)


NAMES = [*DATASETS, *(c[0] for c in CASES)]


# ----------------------------------------------------------------------------- array path
@pytest.mark.parametrize("name", NAMES)
def test_robust_slope_is_statsmodels_logit_on_winsorised_logits(name: str) -> None:
    p, y = _data(name)
    fit, lo, hi = _statsmodels_winsorised(_x(p), y)
    r = rc.robust_calibration_slope(y, p)
    # source: numpy.quantile for the clip; statsmodels Logit(y, [1, clip(x, lo, hi)]) params / bse
    assert r.extra["clip_low"] == lo
    assert r.extra["clip_high"] == hi
    assert r.value == pytest.approx(fit.params[1], rel=1e-8)
    assert r.se == pytest.approx(fit.bse[1], rel=1e-7)
    assert r.extra["intercept"] == pytest.approx(fit.params[0], rel=1e-8, abs=1e-10)
    assert r.extra["n_winsorised"] == np.sum((_x(p) < lo) | (_x(p) > hi))  # numpy count
    z = (fit.params[1] - 1) / fit.bse[1]
    # source: two-sided normal p (scipy.stats.norm) of statsmodels' Wald z for slope = 1
    assert r.extra["p_value_wald_slope_eq_1"] == pytest.approx(2 * norm.sf(abs(z)), rel=1e-6)


def test_integer_weights_equal_repeated_rows() -> None:
    p, y = _beta_week(250, 21)
    w = np.random.default_rng(22).integers(1, 4, p.size)
    fit, _, _ = _statsmodels_winsorised(np.repeat(_x(p), w), np.repeat(y, w))
    r = rc.robust_calibration_slope(y, p, sample_weight=w)
    # source: numpy.quantile and statsmodels Logit on the rows repeated `w` times
    assert r.value == pytest.approx(fit.params[1], rel=1e-8)
    assert r.se == pytest.approx(fit.bse[1], rel=1e-7)


def test_from_logits_equals_probability_path() -> None:
    p, y = _beta_week(400, 23)
    assert rc.robust_calibration_slope_from_logits(y, _x(p)).value == pytest.approx(
        rc.robust_calibration_slope(y, p).value, rel=1e-12)


def test_edge_cases_give_statuses_not_numbers() -> None:
    # one class: no maximum-likelihood slope (docs/methods.md §9.2)
    assert rc.robust_calibration_slope([0, 0, 0], [0.1, 0.2, 0.3]).status is Status.NO_VALUE
    assert rc.robust_calibration_slope([], []).status is Status.NO_VALUE
    # every logit equal: the clip is one point, nothing to fit a slope to
    y = np.r_[np.ones(30), np.zeros(40)]
    flat = rc.robust_calibration_slope(y, np.full(70, 0.3))
    assert flat.status is Status.TOO_FEW_CASES
    assert flat.extra["clip_low"] == flat.extra["clip_high"]
    # the plain fit's floor of 20 events and 20 non-events applies unchanged
    p, yy = _beta_week(60, 24, extreme=False)
    assert rc.robust_calibration_slope(yy, p).status is Status.TOO_FEW_CASES
    with pytest.raises(ValueError, match="tail"):
        rc.robust_calibration_slope(y, np.full(70, 0.3), tail=0.5)


# ----------------------------------------------------------------------------- summary path
def _binned_winsorised_glm(p: np.ndarray, y: np.ndarray) -> float:
    """statsmodels GLM Binomial, freq_weights: one row per (fine bin, class) at the class's mean
    logit, the clip = numpy.quantile of those rows repeated by their counts (docs/methods.md §9.6)."""
    x = _x(p)
    k = np.searchsorted(FINE_EDGES, p, side="right")
    size = FINE_EDGES.size + 1
    n1k = np.bincount(k, weights=y, minlength=size)
    n0k = np.bincount(k, weights=1 - y, minlength=size)
    with np.errstate(invalid="ignore", divide="ignore"):  # empty cells are dropped below
        x1k = np.bincount(k, weights=x * y, minlength=size) / n1k
        x0k = np.bincount(k, weights=x * (1 - y), minlength=size) / n0k
    rows_y, rows_x, weight = np.r_[np.ones(size), np.zeros(size)], np.r_[x1k, x0k], np.r_[n1k, n0k]
    keep = weight > 0
    rows_y, rows_x, weight = rows_y[keep], rows_x[keep], weight[keep]
    lo, hi = np.quantile(np.repeat(rows_x, weight.astype(int)), [TAIL, 1 - TAIL])
    fit = sm.GLM(rows_y, sm.add_constant(np.clip(rows_x, lo, hi)), family=sm.families.Binomial(),
                 freq_weights=weight).fit(tol=1e-12)
    return float(fit.params[1])


@pytest.mark.parametrize("name", NAMES)
def test_summary_robust_slope_matches_binned_glm_and_rows(name: str) -> None:
    p, y = _data(name)
    r = sm_.calibration_slope_robust(Summary.from_arrays(p, y))
    # source: statsmodels GLM on the test's own binning of the rows (the summary's recipe)
    assert r.value == pytest.approx(_binned_winsorised_glm(p, y), rel=1e-6)
    # source: statsmodels Logit on the rows; the clip moves by at most about one fine bin
    # (0.05 in logit) and bin-mean logits stand in for rows: 5e-3 relative chosen (the
    # largest difference seen over 40 seeded weeks was 1.8e-3)
    row_fit, _, _ = _statsmodels_winsorised(_x(p), y)
    assert r.value == pytest.approx(row_fit.params[1], rel=5e-3)


def test_plain_slope_still_matches_statsmodels_with_the_extreme_case() -> None:
    p, y = _beta_week(300, 11)
    fit = sm.Logit(y, sm.add_constant(_x(p))).fit(disp=0, tol=1e-12)
    out = sm_.all_metrics(Summary.from_arrays(p, y))
    # source: statsmodels Logit(y, [1, logit p]) on the rows; docs/methods.md §9.4 tolerance 3e-4
    assert rc.calibration_slope(y, p).value == pytest.approx(fit.params[1], rel=1e-8)
    assert out["calibration_slope"].value == pytest.approx(fit.params[1], abs=3e-4)
    # the case does move the plain slope far from 1 (the problem the robust slope answers) ...
    assert fit.params[1] < 0.6
    # ... and the robust one stays within its own 95 % interval of 1
    robust = out["calibration_slope_robust"]
    assert robust.ci[0] < 1.0 < robust.ci[1]


# ----------------------------------------------------------------------------- counts
def _count_rows() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(31)
    specials = np.array([0.0, 1e-300, 1e-17, EPS, 1e-9, 5e-7, 1e-6, 0.5, 1 - 1e-6, 1 - 5e-7,
                         1 - 1e-9, 1 - EPS, 1 - 1e-17, 1.0])
    p = np.r_[np.tile(specials, 3), rng.random(200)]
    state = np.r_[np.repeat([POSITIVE, NEGATIVE, UNLABELED], specials.size),
                  rng.choice([POSITIVE, NEGATIVE, UNLABELED], 200)]
    return p, state


@pytest.mark.parametrize("implicit", [False, True])
def test_clipped_and_confident_error_counts_equal_numpy(implicit: bool) -> None:
    p, state = _count_rows()
    out = sm_.all_metrics(Summary.from_arrays(p, state), implicit_negatives=implicit)
    # the rows the label metrics use: labeled ones, plus unlabeled as y = 0 with implicit negatives
    used = (state != UNLABELED) | implicit
    y = (state == POSITIVE).astype(int)
    # source: numpy counting on the raw arrays, with the definitions of docs/methods.md §1.2
    clipped = np.sum(used & ((p < EPS) | (p > 1 - EPS)))
    confident = np.sum(used & (((y == 1) & (p < 1e-6)) | ((y == 0) & (p > 1 - 1e-6))))
    assert out["n_clipped"].value == clipped
    assert out["n_confident_errors"].value == confident
    assert out["n_clipped"].n == np.sum(used)
    assert clipped > 0
    assert confident > 0  # the fixture has both, so the comparison can fail


def test_counts_are_weighted_sums() -> None:
    p = np.array([1e-20, 1e-8, 0.4, 1 - 1e-8])
    y = np.array([1, 1, 0, 0])
    w = np.array([2.5, 1.0, 3.0, 0.5])
    out = sm_.all_metrics(Summary.from_arrays(p, y, sample_weight=w))
    # source: numpy weighted counts: p < ε has weight 2.5; confident errors 2.5 + 1.0 + 0.5
    assert out["n_clipped"].value == pytest.approx(float(w[p < EPS].sum()))
    assert out["n_confident_errors"].value == pytest.approx(4.0)
