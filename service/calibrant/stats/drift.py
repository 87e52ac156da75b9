"""Score-distribution drift between a reference and a current sample, without labels:
PSI, Kolmogorov–Smirnov and Jensen–Shannon distance, each with a reference
level for the sample sizes.

Bins are frozen from the reference (default: 10 bins at reference deciles,
open outer edges, left-closed [e_k, e_{k+1}) like ``np.histogram``); never
recompute them from the current window. Every statistic also has a
``*_from_counts`` form taking two histograms on shared bins, which the
mergeable summary uses.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats
from scipy.spatial.distance import jensenshannon

from calibrant.stats._numerics import weighted_quantile
from calibrant.stats._validation import as_counts, as_scores, check_n_bins
from calibrant.stats.result import Estimate, Status, estimate, missing

__all__ = [
    "PSI_COMMON_PRACTICE_MAJOR",
    "PSI_COMMON_PRACTICE_MINOR",
    "histogram",
    "js_distance",
    "js_distance_from_counts",
    "ks_2samp",
    "ks_from_counts",
    "psi",
    "psi_from_counts",
    "reference_bin_edges",
]

#: "minor shift" level: common practice, no published source, ignores sample size (docs/methods.md §17.2)
PSI_COMMON_PRACTICE_MINOR = 0.1
#: "major shift" level: common practice, no published source, ignores sample size
PSI_COMMON_PRACTICE_MAJOR = 0.25


def reference_bin_edges(
    reference: ArrayLike, *, n_bins: int = 10, sample_weight: ArrayLike | None = None
) -> np.ndarray:
    """Edges [−inf, q_1, …, q_{B−1}, +inf] at the (weighted) reference quantiles k/B.

    Quantiles by ``numpy.quantile`` (linear interpolation); ties give duplicate
    edges and hence empty bins. Scores need not be probabilities (logits work).
    """
    n_bins = check_n_bins(n_bins)
    s = as_scores(reference, sample_weight, name="reference", check_unit_interval=False)
    if s.p.size == 0:
        raise ValueError("reference is empty: bin edges need reference data")
    inner = weighted_quantile(s.p, np.linspace(0.0, 1.0, n_bins + 1)[1:-1], s.w)
    return np.concatenate([[-np.inf], inner, [np.inf]])


def histogram(
    values: ArrayLike, edges: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> np.ndarray:
    """Weighted counts in left-closed bins [e_k, e_{k+1}); values outside go to the end bins."""
    e = np.asarray(edges, dtype=np.float64)
    s = as_scores(values, sample_weight, name="values", check_unit_interval=False)
    ids = np.searchsorted(e[1:-1], s.p, side="right")
    return np.bincount(ids, weights=s.w, minlength=e.size - 1).astype(np.float64)


def _pair(ref_counts: ArrayLike, cur_counts: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    r = as_counts(ref_counts, "reference_counts")
    c = as_counts(cur_counts, "current_counts")
    if r.shape != c.shape:
        raise ValueError(f"histograms differ in length: {r.size} vs {c.size}")
    return r, c


def _multinomial_null(
    r: np.ndarray,
    c: np.ndarray,
    statistic: Callable[[np.ndarray, np.ndarray], float],
    *,
    n_null: int,
    seed: int,
) -> np.ndarray:
    """Statistic under "no shift": both samples multinomial from the pooled proportions."""
    rng = np.random.default_rng(seed)
    pooled = (r + c) / (r.sum() + c.sum())
    rs = rng.multinomial(round(r.sum()), pooled, size=n_null).astype(np.float64)
    cs = rng.multinomial(round(c.sum()), pooled, size=n_null).astype(np.float64)
    return np.array([statistic(a, b) for a, b in zip(rs, cs, strict=True)])


def _psi_value(r: np.ndarray, c: np.ndarray, smoothing: float) -> float:
    a = (c + smoothing) / (c + smoothing).sum()
    e = (r + smoothing) / (r + smoothing).sum()
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = (a - e) * np.log(a / e)
    terms = np.where(a == e, 0.0, terms)  # 0 · ln(0/0) for a bin empty in both samples
    return float(np.sum(terms))


def psi_from_counts(
    reference_counts: ArrayLike,
    current_counts: ArrayLike,
    *,
    smoothing: float = 0.5,
    n_null: int = 0,
    seed: int = 0,
) -> Estimate:
    """PSI from two histograms on shared bins; see :func:`psi`."""
    r, c = _pair(reference_counts, current_counts)
    if smoothing < 0:
        raise ValueError("smoothing must be non-negative")
    n, m, B = float(r.sum()), float(c.sum()), int(r.size)
    extra: dict[str, float | int | str | None] = {
        "n_reference": n, "n_current": m, "n_bins": B, "smoothing": smoothing,
        "common_practice_minor": PSI_COMMON_PRACTICE_MINOR,
        "common_practice_major": PSI_COMMON_PRACTICE_MAJOR,
    }
    if n <= 0 or m <= 0:
        return missing(Status.NO_VALUE, "reference or current sample is empty", extra=extra)
    if B < 2:
        return missing(Status.NO_VALUE, "need at least 2 bins", extra=extra)
    extra["null_95"] = float(stats.chi2.ppf(0.95, B - 1)) * (1.0 / n + 1.0 / m)
    extra["null_expected"] = (B - 1) * (1.0 / n + 1.0 / m)  # the mean of (1/n + 1/m)·χ²_{B−1}
    value = _psi_value(r, c, smoothing)
    if not math.isfinite(value):
        return missing(Status.NO_VALUE,
                       "a bin is empty in one sample and smoothing is 0: PSI is infinite",
                       extra=extra)
    if n_null > 0:
        sims = _multinomial_null(r, c, lambda a, b: _psi_value(a, b, smoothing),
                                 n_null=n_null, seed=seed)
        extra["null_95_simulated"] = float(np.quantile(sims[np.isfinite(sims)], 0.95))
    return estimate(value, n=m, extra=extra)


def psi(
    reference: ArrayLike,
    current: ArrayLike,
    *,
    edges: ArrayLike | None = None,
    n_bins: int = 10,
    smoothing: float = 0.5,
    reference_weight: ArrayLike | None = None,
    current_weight: ArrayLike | None = None,
    n_null: int = 0,
    seed: int = 0,
) -> Estimate:
    """Population stability index between reference and current scores.

        PSI = Σ_b (a_b − e_b) ln(a_b / e_b) = KL(a‖e) + KL(e‖a),

    a, e the current and reference bin proportions after adding ``smoothing``
    (default ½) to every count, so empty bins do not make it infinite.
    Bins: ``edges`` if given, else :func:`reference_bin_edges` (``n_bins``
    reference quantiles).

    Reference level (``extra['null_95']``): under no shift PSI ≈ (1/n + 1/m)·χ²_{B−1},
    so the null 95 % point is χ²_{0.95,B−1}(1/n + 1/m) (0.0169 for n = m = 2000,
    B = 10; 0.34 for n = m = 100) and the value expected under no shift
    (``extra['null_expected']``) is (B − 1)(1/n + 1/m). ``n_null > 0`` adds a seeded multinomial
    simulation of the same (``extra['null_95_simulated']``). The fixed levels
    0.1 ("minor") and 0.25 ("major") are common practice with no published
    source and no regard to sample size; they appear in ``extra`` only as
    labeled context. Alarm on PSI relative to ``null_95``.

    Edge cases: an empty sample → no_value; smoothing 0 with an empty bin → no_value.

    References: Yurdakul (2018), PhD dissertation, Western Michigan University;
    Yurdakul & Naranjo, J Risk Model Validation [year M, from memory];
    docs/methods.md §17.1–6.2 [D for the null point].
    """
    r, c = _histograms(reference, current, edges, n_bins, reference_weight, current_weight)
    return psi_from_counts(r, c, smoothing=smoothing, n_null=n_null, seed=seed)


def _histograms(
    reference: ArrayLike,
    current: ArrayLike,
    edges: ArrayLike | None,
    n_bins: int,
    reference_weight: ArrayLike | None,
    current_weight: ArrayLike | None,
) -> tuple[np.ndarray, np.ndarray]:
    e = (reference_bin_edges(reference, n_bins=n_bins, sample_weight=reference_weight)
         if edges is None else np.asarray(edges, dtype=np.float64))
    return (histogram(reference, e, sample_weight=reference_weight),
            histogram(current, e, sample_weight=current_weight))


def _js(r: np.ndarray, c: np.ndarray, smoothing: float) -> float:
    return float(jensenshannon((r + smoothing) / (r + smoothing).sum(),
                               (c + smoothing) / (c + smoothing).sum(), base=2))


def js_distance_from_counts(
    reference_counts: ArrayLike,
    current_counts: ArrayLike,
    *,
    smoothing: float = 0.0,
    n_null: int = 1000,
    seed: int = 0,
) -> Estimate:
    """Jensen–Shannon distance (base 2) from two histograms; see :func:`js_distance`."""
    r, c = _pair(reference_counts, current_counts)
    if smoothing < 0:
        raise ValueError("smoothing must be non-negative")
    n, m = float(r.sum()), float(c.sum())
    extra: dict[str, float | int | str | None] = {
        "n_reference": n, "n_current": m, "n_bins": int(r.size), "smoothing": smoothing,
        "base": 2, "n_null": n_null, "seed": seed}
    if n <= 0 or m <= 0:
        return missing(Status.NO_VALUE, "reference or current sample is empty", extra=extra)
    value = _js(r, c, smoothing)
    if n_null > 0:
        sims = _multinomial_null(r, c, lambda a, b: _js(a, b, smoothing), n_null=n_null, seed=seed)
        extra["null_95"] = float(np.quantile(sims, 0.95))
    return estimate(value, n=m, extra=extra)


def js_distance(
    reference: ArrayLike,
    current: ArrayLike,
    *,
    edges: ArrayLike | None = None,
    n_bins: int = 10,
    smoothing: float = 0.0,
    reference_weight: ArrayLike | None = None,
    current_weight: ArrayLike | None = None,
    n_null: int = 1000,
    seed: int = 0,
) -> Estimate:
    """Jensen–Shannon distance (base 2, in [0, 1]) between binned score distributions.

    With m = (a + e)/2: JSD = ½ KL(a‖m) + ½ KL(e‖m); the distance sqrt(JSD) is a
    metric. Same as ``scipy.spatial.distance.jensenshannon(a, e, base=2)``
    (that function's default natural log gives the distance in nats, at most
    sqrt(ln 2) ≈ 0.833; here bits, at most 1). Finite with empty bins, so
    ``smoothing`` defaults to 0. Same bins as :func:`psi`.

    Reference level (``extra['null_95']``): 95th percentile of the distance
    when both samples are drawn multinomially from the pooled bin proportions
    with the observed sizes (``n_null`` draws, ``numpy.random.default_rng(seed)``;
    set ``n_null=0`` to skip). There is no standard null distribution.

    Edge cases: an empty sample → no_value.

    References: Lin (1991), IEEE Trans Inf Theory 37(1):145–151 [M, from
    memory]; Endres & Schindelin (2003), IEEE Trans Inf Theory 49(7):1858–1860
    [M]; docs/methods.md §17.4.
    """
    r, c = _histograms(reference, current, edges, n_bins, reference_weight, current_weight)
    return js_distance_from_counts(r, c, smoothing=smoothing, n_null=n_null, seed=seed)


def _ks_asymp_p(d: float, n: float, m: float) -> float:
    en = n * m / (n + m)  # scipy.stats.ks_2samp(method="asymp"), two-sided
    return float(np.clip(stats.kstwo.sf(d, max(round(en), 1)), 0.0, 1.0))


def ks_from_counts(reference_counts: ArrayLike, current_counts: ArrayLike) -> Estimate:
    """KS D evaluated at the shared bin edges, asymptotic p; a lower bound on the exact D.

    The shortfall is at most the largest bin mass (docs/methods.md §17.3).
    """
    r, c = _pair(reference_counts, current_counts)
    n, m = float(r.sum()), float(c.sum())
    if n <= 0 or m <= 0:
        return missing(Status.NO_VALUE, "reference or current sample is empty")
    d = float(np.max(np.abs(np.cumsum(r) / n - np.cumsum(c) / m)))
    return estimate(d, n=m, extra={"p_value": _ks_asymp_p(d, n, m), "p_method": "asymp",
                                   "n_reference": n, "n_current": m, "lower_bound": 1})


def ks_2samp(
    reference: ArrayLike,
    current: ArrayLike,
    *,
    reference_weight: ArrayLike | None = None,
    current_weight: ArrayLike | None = None,
) -> Estimate:
    """Two-sample Kolmogorov–Smirnov D = sup_t |F_ref(t) − F_cur(t)| with a p-value.

    Unweighted: ``scipy.stats.ks_2samp`` (default ``method='auto'``: exact p
    for samples up to 10,000, else asymptotic). Weighted (frequency weights):
    D from the weighted empirical CDFs (= D of the repeated rows) and the
    asymptotic p of ``method='asymp'`` with n = Σw; ``extra['p_method']``
    says which. D is invariant to monotone transforms (p or logit p). The p
    assumes continuous, independent samples: conservative with ties, too small
    with clustering; with large n treat D as an effect size.

    Edge cases: an empty sample → no_value.

    References: Kolmogorov (1933) [M, from memory]; Smirnov (1948), Ann Math
    Stat 19(2):279–281 [M]; docs/methods.md §17.3.
    """
    a = as_scores(reference, reference_weight, name="reference", check_unit_interval=False,
                  weight_name="reference_weight")
    b = as_scores(current, current_weight, name="current", check_unit_interval=False,
                  weight_name="current_weight")
    n, m = a.n, b.n
    if n <= 0 or m <= 0:
        return missing(Status.NO_VALUE, "reference or current sample is empty")
    if a.unit_weights and b.unit_weights:
        res = stats.ks_2samp(a.p, b.p)
        return estimate(float(res.statistic), n=m, extra={
            "p_value": float(res.pvalue), "p_method": "scipy auto",
            "n_reference": n, "n_current": m})
    grid = np.unique(np.concatenate([a.p, b.p]))
    fa = _weighted_ecdf(a.p, a.w, grid)
    fb = _weighted_ecdf(b.p, b.w, grid)
    d = float(np.max(np.abs(fa - fb)))
    return estimate(d, n=m, extra={"p_value": _ks_asymp_p(d, n, m), "p_method": "asymp",
                                   "n_reference": n, "n_current": m})


def _weighted_ecdf(x: np.ndarray, w: np.ndarray, grid: np.ndarray) -> np.ndarray:
    order = np.argsort(x, kind="mergesort")
    cw = np.concatenate([[0.0], np.cumsum(w[order])])
    return cw[np.searchsorted(x[order], grid, side="right")] / cw[-1]
