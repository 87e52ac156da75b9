"""Reference values of binned and smoothed calibration errors and of discrimination.

ECE/MCE from ``sklearn.calibration.calibration_curve`` (and a numpy bincount
twin), ICI from statsmodels ``lowess`` and from a direct local-quadratic
fit, AUC from scikit-learn and scipy, DeLong and Hanley–McNeil SEs in numpy,
average precision from scikit-learn and from its step formula.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import stats
from scipy.special import expit, logit
from sklearn.calibration import calibration_curve
from sklearn.metrics import average_precision_score, roc_auc_score
from statsmodels.nonparametric.smoothers_lowess import lowess

from tests.reference.entries import formula, lib

Z_196 = 1.96


def _edges(p: np.ndarray, strategy: str) -> np.ndarray:
    if strategy == "uniform":
        return np.linspace(0.0, 1.0, 11)
    return np.percentile(p, np.linspace(0.0, 1.0, 11) * 100)


def positive_class_ece(p: np.ndarray, y: np.ndarray, edges: np.ndarray, side: str) -> float:
    """Σ_b |Σy − Σp| / n over bins; side "left" = (lo, hi] as calibration_curve, "right" = [lo, hi)."""
    k = np.searchsorted(edges[1:-1], p, side=side)
    b = edges.size - 1
    return float(np.sum(np.abs(np.bincount(k, y, b) - np.bincount(k, p, b))) / y.size)


def calibration_errors(p: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for strategy in ("uniform", "quantile"):
        prob_true, prob_pred = calibration_curve(y, p, n_bins=10, strategy=strategy)
        edges = _edges(p, strategy)
        counts = np.bincount(np.searchsorted(edges[1:-1], p), minlength=10)
        counts = counts[counts > 0]  # calibration_curve returns the non-empty bins only
        gap = np.abs(prob_true - prob_pred)
        curve = (f"sklearn.calibration.calibration_curve(strategy='{strategy}') "
                 "+ counts from the same searchsorted binning")
        out[f"ece_{strategy}_10"] = lib(np.sum(counts * gap) / y.size, curve)
        out[f"ece_{strategy}_10_numpy"] = formula(
            positive_class_ece(p, y, edges, "left"), "numpy bincount")
        out[f"mce_{strategy}_10"] = lib(
            gap.max(), "max abs(prob_true - prob_pred) from calibration_curve")
    confidence = np.maximum(p, 1 - p)
    correct = ((p >= 0.5) == (y == 1)).astype(float)
    out["ece_top_label_10"] = formula(
        positive_class_ece(confidence, correct, np.linspace(0.5, 1.0, 11), "left"),
        "ECE on (max(p,1-p), correctness), 10 equal-width bins on [0.5,1]: "
        "a DIFFERENT quantity from the positive-class ECE")
    return out


def local_quadratic(p: np.ndarray, y: np.ndarray, span: float = 0.75) -> np.ndarray:
    """Direct local-quadratic tricube fit at every p (the loess definition, no interpolation).

    Neighbourhood: the floor(span·n) nearest points; weight (1 − (d/d_q)³)³ with
    d_q the distance to the last of them (Cleveland 1979; Cleveland & Devlin 1988).
    """
    n = p.size
    q = int(np.floor(n * span))
    fitted = np.empty(n)
    for i, x0 in enumerate(p):
        d = np.abs(p - x0)
        u = d / np.partition(d, q - 1)[q - 1]
        root_w = np.sqrt(np.where(u < 1.0, (1.0 - u**3) ** 3, 0.0))
        X = np.column_stack([np.ones(n), p - x0, (p - x0) ** 2])
        fitted[i] = np.linalg.lstsq(X * root_w[:, None], y * root_w, rcond=None)[0][0]
    return fitted


def _distances(p: np.ndarray, fitted: np.ndarray) -> dict[str, float]:
    d = np.abs(fitted - p)
    return {"ICI": d.mean(), "E50": np.median(d), "E90": np.quantile(d, 0.9), "Emax": d.max()}


def smoothed_calibration(p: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """ICI, E50, E90, Emax (Austin & Steyerberg 2019) with two smoothers."""
    linear = lowess(y, p, frac=0.75, it=0, return_sorted=False)
    return {
        "ici_lowess_local_linear": lib(
            _distances(p, linear),
            "statsmodels lowess(y, p, frac=0.75, it=0): local LINEAR tricube smoother"),
        "ici_loess_local_quadratic": formula(
            _distances(p, local_quadratic(p, y.astype(float))),
            "numpy local quadratic tricube, span 0.75 (R loess defaults, direct surface)"),
    }


def discrimination(p: np.ndarray, y: np.ndarray) -> dict[str, Any]:
    """AUC with DeLong (1988) and Hanley & McNeil (1982) SEs, and average precision."""
    pos, neg = y == 1, y == 0
    n1, n0 = int(pos.sum()), int(neg.sum())
    auc = roc_auc_score(y, p)
    mw = stats.mannwhitneyu(p[pos], p[neg], alternative="two-sided")
    ranks = stats.rankdata(p)
    v10 = (ranks[pos] - stats.rankdata(p[pos])) / n0  # placement of each event among non-events
    v01 = 1.0 - (ranks[neg] - stats.rankdata(p[neg])) / n1
    se = np.sqrt(v10.var(ddof=1) / n1 + v01.var(ddof=1) / n0)
    half = Z_196 * se / (auc * (1 - auc))
    q1, q2 = auc / (2 - auc), 2 * auc * auc / (1 + auc)
    se_hm = np.sqrt((auc * (1 - auc) + (n1 - 1) * (q1 - auc**2) + (n0 - 1) * (q2 - auc**2))
                    / (n1 * n0))
    return {
        "auc": lib(auc, "sklearn.metrics.roc_auc_score"),
        "auc_mann_whitney": lib(mw.statistic / (n1 * n0), "scipy.stats.mannwhitneyu U/(n1 n0)"),
        "auc_mann_whitney_p": lib(mw.pvalue, "scipy.stats.mannwhitneyu two-sided p"),
        "auc_delong_se": formula(se, "DeLong 1988 via midranks"),
        "auc_95ci_wald": formula([auc - Z_196 * se, auc + Z_196 * se], "AUC -/+ 1.96 SE_DeLong"),
        "auc_95ci_logit": formula([expit(logit(auc) - half), expit(logit(auc) + half)],
                                  "logit-scale Wald CI"),
        "auc_hanley_mcneil_se": formula(se_hm, "Hanley & McNeil 1982"),
        "average_precision": lib(average_precision_score(y, p),
                                 "sklearn.metrics.average_precision_score"),
        "average_precision_numpy": formula(step_average_precision(p, y),
                                           "sum_k (R_k - R_{k-1}) P_k over distinct thresholds"),
        "average_precision_no_skill": formula(n1 / y.size, "prevalence"),
    }


def step_average_precision(p: np.ndarray, y: np.ndarray) -> float:
    """Σ_k (R_k − R_{k−1}) P_k with one threshold per distinct score, scores descending."""
    order = np.argsort(-p, kind="mergesort")
    ps, ys = p[order], y[order]
    last_of_tie = np.r_[np.diff(ps) != 0, True]
    tp = np.cumsum(ys)[last_of_tie]
    fp = np.cumsum(1 - ys)[last_of_tie]
    recall = tp / ys.sum()
    return float(np.sum(np.diff(np.r_[0.0, recall]) * tp / (tp + fp)))
