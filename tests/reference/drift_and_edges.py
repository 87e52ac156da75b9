"""Reference values of score drift (PSI, KS, Jensen–Shannon), library edge behaviour,
and the published Spiegelhalter example."""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
from scipy import stats
from scipy.spatial.distance import jensenshannon
from scipy.special import logit
from sklearn.metrics import average_precision_score, brier_score_loss, log_loss, roc_auc_score

from tests.reference.entries import PUBLISHED, VERSIONS, formula, lib, plain
from tests.reference.labeled_binned import positive_class_ece, step_average_precision
from tests.reference.recipes import SEED, breast_cancer, synthetic

PSI_NULL_DRAWS = 2000
PSI_NULL_RECIPE = (
    f"synthetic_drift_vs_reference/psi_null_95pct_simulated: {PSI_NULL_DRAWS} pairs of "
    "samples of the observed sizes, both drawn multinomially from the reference decile "
    f"proportions with rng=numpy.random.default_rng({SEED}) ({PSI_NULL_DRAWS} reference "
    f"draws, then {PSI_NULL_DRAWS} current draws), unsmoothed PSI of each pair, "
    "numpy.quantile(sims, 0.95)"
)


def decile_edges(reference: np.ndarray) -> np.ndarray:
    """Reference deciles (numpy.quantile) as inner edges, open outer edges."""
    inner = np.quantile(reference, np.linspace(0.0, 1.0, 11))[1:-1]
    return np.concatenate([[-np.inf], inner, [np.inf]])


def psi(ref_counts: np.ndarray, cur_counts: np.ndarray, add: float = 0.0) -> float:
    """Σ (a − e) ln(a/e) over bins, ``add`` added to every count first."""
    e = (ref_counts + add) / (ref_counts + add).sum()
    a = (cur_counts + add) / (cur_counts + add).sum()
    return float(np.sum((a - e) * np.log(a / e)))


def _null_psi_95(ref_counts: np.ndarray, cur_counts: np.ndarray) -> float:
    rng = np.random.default_rng(SEED)
    share = ref_counts / ref_counts.sum()
    refs = rng.multinomial(int(ref_counts.sum()), share, size=PSI_NULL_DRAWS)
    curs = rng.multinomial(int(cur_counts.sum()), share, size=PSI_NULL_DRAWS)
    sims = [psi(r.astype(float), c.astype(float)) for r, c in zip(refs, curs, strict=True)]
    return float(np.quantile(sims, 0.95))


def synthetic_drift() -> dict[str, Any]:
    p, _, p_ref = synthetic()
    edges = decile_edges(p_ref)
    rc, cc = np.histogram(p_ref, edges)[0], np.histogram(p, edges)[0]
    ks = stats.ks_2samp(p_ref, p)
    logit_edges = np.concatenate([[-np.inf], np.arange(-4.0, 2.0001, 0.5), [np.inf]])
    rl, cl = np.histogram(logit(p_ref), logit_edges)[0], np.histogram(logit(p), logit_edges)[0]
    b = edges.size - 1
    return {
        "psi_ref_deciles": formula(
            psi(rc, cc), "sum (a-e) ln(a/e), 10 bins at reference deciles "
            "(numpy.quantile, np.histogram left-closed)"),
        "psi_ref_deciles_laplace0.5": formula(psi(rc, cc, 0.5), "same with +0.5 per bin"),
        "psi_null_95pct_chi2_approx": formula(
            stats.chi2.ppf(0.95, b - 1) * (1 / p_ref.size + 1 / p.size),
            "chi2_{0.95, B-1} * (1/n + 1/m), quantile from scipy.stats.chi2.ppf"),
        "psi_null_95pct_simulated": formula(_null_psi_95(rc, cc),
                                            "2000 null simulations, same n, m, binning"),
        "ks_2samp": lib({"D": ks.statistic, "p": ks.pvalue},
                        "scipy.stats.ks_2samp(p_ref, p_cur), default method='auto' "
                        "(asymptotic p at this n)"),
        "ks_2samp_on_logit_scale": lib(stats.ks_2samp(logit(p_ref), logit(p)).statistic,
                                       "identical D: KS is invariant to monotone transforms"),
        "js_distance_base2_ref_deciles": lib(
            jensenshannon(rc / rc.sum(), cc / cc.sum(), base=2),
            "scipy.spatial.distance.jensenshannon(base=2) on the PSI bins"),
        "js_distance_natural_log": lib(jensenshannon(rc / rc.sum(), cc / cc.sum()),
                                       "scipy jensenshannon, natural log (max sqrt(ln 2))"),
        "psi_logit_width0.5": formula(
            psi(rl, cl, 0.5),
            "PSI on 14 equal-width logit bins [-4,2] + 2 open tails, +0.5 smoothing"),
        "js_distance_base2_logit_width0.5": lib(jensenshannon(rl / rl.sum(), cl / cl.sum(), base=2),
                                                "scipy jensenshannon on the same logit bins"),
    }


def breast_cancer_drift() -> dict[str, Any]:
    p, _, p_train = breast_cancer()
    edges = decile_edges(p_train)
    rc = np.histogram(p_train, edges)[0].astype(float)
    cc = np.histogram(p, edges)[0].astype(float)
    ks = stats.ks_2samp(p_train, p)
    return {
        "psi_ref_deciles_laplace0.5": formula(psi(rc, cc, 0.5), "reference = train-set scores",
                                              ref_counts=rc, cur_counts=cc),
        "ks_2samp": lib({"D": ks.statistic, "p": ks.pvalue}, "scipy.stats.ks_2samp"),
        "js_distance_base2": lib(jensenshannon((rc + 0.5) / (rc + 0.5).sum(),
                                               (cc + 0.5) / (cc + 0.5).sum(), base=2),
                                 "scipy jensenshannon on +0.5-smoothed decile bins"),
    }


def _observe(call) -> dict[str, Any]:
    """What a library call returns or raises, with the warnings it emits."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = call()
        except ValueError as exc:
            return {"error": f"ValueError: {exc}"}
    return {"result": plain(result), "warnings": [str(w.message) for w in caught]}


def _spiegelhalter(y: list[int], p: list[float]) -> float:
    ya, pa = np.array(y, dtype=float), np.array(p)
    return float(np.sum((ya - pa) * (1 - 2 * pa)) / np.sqrt(np.sum((1 - 2 * pa) ** 2 * pa * (1 - pa))))


def edge_cases() -> dict[str, Any]:
    y2, p0 = np.array([1, 0]), np.array([0.0, 0.0])
    clip15 = np.clip(p0, 1e-15, 1 - 1e-15)
    y_neg, p_neg = np.zeros(5, dtype=int), np.array([0.1, 0.2, 0.3, 0.4, 0.5])
    p_syn, y_syn, _ = synthetic()
    pr = np.round(p_syn, 2)  # two-decimal scores: ties and scores on bin edges
    pos, neg = y_syn == 1, y_syn == 0
    n1, n0 = int(pos.sum()), int(neg.sum())
    ranks = stats.rankdata(pr)
    uniform = np.linspace(0.0, 1.0, 11)
    sk = f"sklearn {VERSIONS['scikit-learn']}"
    return {
        "log_loss_p0_for_positive_float64": lib(
            log_loss(y2, p0), "sklearn log_loss clips at float64 eps=2.22e-16 -> -ln(eps)/2"),
        "log_loss_p0_for_positive_float32": lib(log_loss(y2, p0.astype(np.float32)),
                                                "same input as float32: clip at 1.19e-7"),
        "log_loss_p0_numpy_clip_1e-15": formula(
            -np.mean(y2 * np.log(clip15) + (1 - y2) * np.log(1 - clip15)),
            "clip 1e-15 (older sklearn default)"),
        "neg_log_eps": formula(
            {"float64": -np.log(np.finfo(np.float64).eps),
             "float32": -np.log(np.finfo(np.float32).eps),
             "1e-15": -np.log(1e-15), "1e-7": -np.log(1e-7)},
            "per-observation cap on the loss"),
        "all_negative_window_behaviour": lib(
            {"log_loss_no_labels": _observe(lambda: log_loss(y_neg, p_neg)),
             "log_loss_labels01": _observe(lambda: log_loss(y_neg, p_neg, labels=[0, 1])),
             "roc_auc_score": _observe(lambda: roc_auc_score(y_neg, p_neg)),
             "average_precision_score": _observe(lambda: average_precision_score(y_neg, p_neg)),
             "brier_score_loss": _observe(lambda: brier_score_loss(y_neg, p_neg))},
            f"{sk} behaviour on y = [0,0,0,0,0]"),
        "spiegelhalter_rufibach_model1": formula(
            _spiegelhalter([1, 0], [0.2, 0.2]), "published value 1.06 (Rufibach 2010, Table 1)"),
        "spiegelhalter_rufibach_model2": formula(
            _spiegelhalter([1, 0], [0.4, 0.5]), "published value 1.22"),
        "auc_rounded_scores": lib(
            {"sklearn": roc_auc_score(y_syn, pr),
             "midrank_formula": (ranks[pos].sum() - n1 * (n1 + 1) / 2) / (n1 * n0),
             "strict_only_ignoring_ties": np.sum(pr[pos][:, None] > pr[neg][None, :]) / (n1 * n0)},
            "p rounded to 2 decimals; ties must count 1/2"),
        "average_precision_rounded_scores": lib(
            {"sklearn": average_precision_score(y_syn, pr),
             "formula": step_average_precision(pr, y_syn)},
            "ties grouped into one threshold"),
        "ece_edge_convention_rounded_scores": formula(
            {"right_closed_(sklearn)": positive_class_ece(pr, y_syn, uniform, "left"),
             "left_closed_(np.digitize)": positive_class_ece(pr, y_syn, uniform, "right"),
             "n_on_edges": int(np.sum(np.round(pr * 100) % 10 == 0))},
            "same data, same 10 bins, different closed side"),
    }


def published() -> dict[str, Any]:
    """Values printed in a paper: copied from the paper, never recomputed."""
    return {
        "spiegelhalter_rufibach_2010_model1": {
            "value": 1.06,
            "source": "Rufibach K (2010) J Clin Epidemiol 63(8):938-939, Table 1: y=(1,0), p=(0.2,0.2)",
            "kind": PUBLISHED, "decimals": 2},
        "spiegelhalter_rufibach_2010_model2": {
            "value": 1.22, "source": "Rufibach K (2010) Table 1: y=(1,0), p=(0.4,0.5)",
            "kind": PUBLISHED, "decimals": 2},
    }
