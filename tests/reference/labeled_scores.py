"""Reference values of the proper scores and calibration tests on one labeled dataset.

Library calls where a library has the statistic (scikit-learn log_loss and
brier_score_loss, statsmodels Logit/GLM, scipy distributions); otherwise plain
numpy of the published formula, named in each entry's ``source``.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import statsmodels.api as sm
from scipy import stats
from scipy.special import expit, logit
from sklearn.metrics import brier_score_loss, log_loss

from tests.reference.entries import formula, lib

EPS = float(np.finfo(np.float64).eps)
Z_196 = 1.96  # the check values use the rounded 1.96, as their sources say


def _two_sided_p(z: float) -> float:
    return float(2.0 * stats.norm.sf(abs(z)))


def scores(p: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """Log-loss, Brier score, their SEs, skills, calibration-null moments, Murphy decomposition."""
    n = y.size
    pc = np.clip(p, EPS, 1.0 - EPS)
    loss = -(y * np.log(pc) + (1 - y) * np.log(1.0 - pc))
    ll = log_loss(y, p, labels=[0, 1])
    entropy = -(pc * np.log(pc) + (1.0 - pc) * np.log(1.0 - pc))
    x = logit(pc)
    e0, sd0 = entropy.mean(), np.sqrt(np.sum(p * (1 - p) * x * x)) / n
    z_ll = (loss.mean() - e0) / sd0
    ybar = y.mean()
    ll_base = log_loss(y, np.full(n, ybar), labels=[0, 1])
    bs = brier_score_loss(y, p)
    sq = (p - y) ** 2
    return {
        "n": formula(n, "len(y)"),
        "n_events": formula(int(y.sum()), "sum(y)"),
        "log_loss": lib(ll, "sklearn.metrics.log_loss(y, p, labels=[0,1])"),
        "log_loss_numpy": formula(
            loss.mean(), "mean(-(y ln p + (1-y) ln(1-p))), p clipped to [2.22e-16, 1-2.22e-16]"),
        "log_loss_se": formula(
            loss.std(ddof=1) / np.sqrt(n), "sd(per-observation loss, ddof=1)/sqrt(n)"),
        "log_loss_expected_if_calibrated": formula(e0, "mean binary entropy H(p)"),
        "log_loss_sd_if_calibrated": formula(sd0, "sqrt(sum p(1-p) logit(p)^2)/n"),
        "log_loss_calibration_z": formula(z_ll, "(LL - E0)/SD0"),
        "log_loss_calibration_p_two_sided": lib(_two_sided_p(z_ll), "scipy.stats.norm.sf"),
        "log_loss_calibration_z_as_weighted_residual": formula(
            -np.sum(x * (y - p)) / np.sqrt(np.sum(x * x * p * (1 - p))),
            "-sum logit(p)(y-p)/sqrt(sum logit(p)^2 p(1-p)); must equal the z above"),
        "log_loss_base_rate": lib(ll_base, "sklearn.metrics.log_loss(y, full(ybar)) = H(ybar)"),
        "log_loss_skill": formula(
            1.0 - ll / ll_base, "1 - LL/LL_base (= McFadden pseudo-R2 vs in-window prevalence)"),
        "brier": lib(bs, "sklearn.metrics.brier_score_loss(y, p)"),
        "brier_se": formula(sq.std(ddof=1) / np.sqrt(n), "sd((p-y)^2, ddof=1)/sqrt(n)"),
        "brier_base_rate": lib(brier_score_loss(y, np.full(n, ybar)),
                               "sklearn.metrics.brier_score_loss(y, full(ybar)) = ybar(1-ybar)"),
        "brier_skill_score": formula(1.0 - bs / (ybar * (1 - ybar)), "1 - BS/(ybar(1-ybar))"),
        "murphy_10bins": formula(murphy(p, y, bs), "numpy; bins [k/10,(k+1)/10), last bin closed"),
        "brier_expected_if_calibrated": formula(np.mean(p * (1 - p)), "mean p(1-p)"),
    }


def murphy(p: np.ndarray, y: np.ndarray, brier: float) -> dict[str, float]:
    """Murphy (1973) terms plus the two within-bin terms of Stephenson et al. (2008)."""
    n = y.size
    k = np.searchsorted(np.linspace(0.0, 1.0, 11)[1:-1], p, side="right")  # [k/10, (k+1)/10)
    n_k = np.bincount(k, minlength=10).astype(float)
    with np.errstate(invalid="ignore"):
        f_k = np.bincount(k, p, 10) / n_k
        o_k = np.bincount(k, y, 10) / n_k
    full = n_k > 0
    ybar = y.mean()
    rel = np.sum(n_k[full] * (f_k[full] - o_k[full]) ** 2) / n
    res = np.sum(n_k[full] * (o_k[full] - ybar) ** 2) / n
    unc = ybar * (1 - ybar)
    wbv = np.sum((p - f_k[k]) ** 2) / n
    wbc = 2.0 * np.sum((p - f_k[k]) * (y - o_k[k])) / n
    return {"REL": rel, "RES": res, "UNC": unc, "WBV": wbv, "WBC": wbc,
            "REL-RES+UNC": rel - res + unc, "REL-RES+UNC+WBV-WBC": rel - res + unc + wbv - wbc,
            "brier": brier}


def calibration_tests(p: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """Spiegelhalter's z and the observed/expected ratio with its interval and z."""
    n = y.size
    a = 1 - 2 * p
    z_s = np.sum((y - p) * a) / np.sqrt(np.sum(a * a * p * (1 - p)))
    o, e = float(y.sum()), float(p.sum())
    half = Z_196 * np.sqrt(1 / o - 1 / n)
    return {
        "spiegelhalter_z": formula(z_s, "sum (y-p)(1-2p)/sqrt(sum (1-2p)^2 p(1-p))"),
        "spiegelhalter_p_two_sided": lib(_two_sided_p(z_s), "scipy.stats.norm.sf"),
        "observed_events": formula(o, "sum y"),
        "expected_events": formula(e, "sum p"),
        "O_over_E": formula(o / e, "sum y / sum p"),
        "O_over_E_95ci": formula([o / e * np.exp(-half), o / e * np.exp(half)],
                                 "exp(ln(O/E) -/+ 1.96 sqrt(1/O - 1/n))"),
        "O_minus_E_z": formula((o - e) / np.sqrt(np.sum(p * (1 - p))), "(O-E)/sqrt(sum p(1-p))"),
    }


def recalibration(p: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """Calibration-in-the-large (offset GLM), logistic recalibration (Cox 1958), LR tests."""
    n = y.size
    pc = np.clip(p, EPS, 1.0 - EPS)
    x = logit(pc)
    X = sm.add_constant(x)
    binomial = sm.families.Binomial()
    offset = sm.GLM(y, np.ones((n, 1)), family=binomial, offset=x).fit()
    full = sm.Logit(y, X).fit(disp=0)
    glm = sm.GLM(y, X, family=binomial).fit()
    pi = expit(X @ full.params)
    fisher_se = np.sqrt(np.diag(np.linalg.inv(X.T @ (X * (pi * (1 - pi))[:, None]))))
    ll_as_is = float(np.sum(y * np.log(pc) + (1 - y) * np.log(1.0 - pc)))
    lr_joint = 2 * (full.llf - ll_as_is)
    lr_citl = 2 * (offset.llf - ll_as_is)
    lr_slope = 2 * (full.llf - offset.llf)
    return {
        "citl_intercept": lib(offset.params[0],
                              "statsmodels GLM(y, 1, Binomial, offset=logit(p)).params"),
        "citl_intercept_se": lib(offset.bse[0],
                                 "statsmodels GLM ... .bse (inverse Fisher information)"),
        "citl_intercept_p_wald": lib(offset.pvalues[0], "statsmodels GLM ... .pvalues"),
        "calibration_intercept": lib(full.params[0],
                                     "statsmodels Logit(y, [1, logit(p)]).params[0]"),
        "calibration_slope": lib(full.params[1], "statsmodels Logit(y, [1, logit(p)]).params[1]"),
        "calibration_intercept_se": lib(full.bse[0], "statsmodels Logit ... .bse[0]"),
        "calibration_slope_se": lib(full.bse[1], "statsmodels Logit ... .bse[1]"),
        "calibration_slope_glm_check": lib(glm.params[1], "statsmodels GLM Binomial, same design"),
        "calibration_se_fisher_numpy": formula(fisher_se, "sqrt(diag((X'WX)^-1)), W=pi(1-pi)"),
        "cox_lr_test_a0_b1_2df": formula(
            {"LR": lr_joint, "p": stats.chi2.sf(lr_joint, 2)},
            "2(statsmodels llf of recalibrated fit - numpy loglik of p as is); "
            "scipy.stats.chi2.sf(.,2)"),
        "lr_test_citl_1df": formula(
            {"LR": lr_citl, "p": stats.chi2.sf(lr_citl, 1)},
            "2(statsmodels llf of offset fit - numpy loglik of p as is); scipy chi2 1 df"),
        "lr_test_slope_given_free_intercept_1df": lib(
            {"LR": lr_slope, "p": stats.chi2.sf(lr_slope, 1)},
            "2(llf_full - llf_offset_model), both statsmodels; scipy chi2 1 df"),
    }


def _hl(n_j: np.ndarray, o_j: np.ndarray, e_j: np.ndarray) -> float:
    pbar = e_j / n_j
    return float(np.sum((o_j - e_j) ** 2 / (n_j * pbar * (1 - pbar))))


def hosmer_lemeshow(p: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """Hosmer & Lemeshow (1980) statistic with equal-count groups and with quantile-edge groups."""
    groups = np.array_split(np.argsort(p, kind="mergesort"), 10)
    table = [[len(g), int(y[g].sum()), float(p[g].sum())] for g in groups]
    n_j, o_j, e_j = (np.array(col, dtype=float) for col in zip(*table, strict=True))
    c = _hl(n_j, o_j, e_j)
    edges = np.quantile(p, np.linspace(0.0, 1.0, 11))
    k = np.searchsorted(edges[1:-1], p, side="left")  # right-closed (e_k, e_k+1]
    c_q = _hl(np.bincount(k, minlength=10).astype(float), np.bincount(k, y, 10),
              np.bincount(k, p, 10))
    return {
        "hosmer_lemeshow_equal_count_groups": formula(
            {"C": c, "df_development(g-2)": 8, "p_df8": stats.chi2.sf(c, 8),
             "df_external(g)": 10, "p_df10": stats.chi2.sf(c, 10), "table_n_O_E": table},
            "numpy statistic (sorted array split into 10 near-equal groups); "
            "p-values scipy.stats.chi2.sf"),
        "hosmer_lemeshow_quantile_edges": formula(
            {"C": c_q, "p_df8": stats.chi2.sf(c_q, 8)},
            "groups from numpy.quantile edges, right-closed; shows grouping sensitivity"),
    }
