"""Small numerical kernels shared by the statistics (no validation here)."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats
from scipy.special import logit, xlogy

from calibrant.stats._validation import EPS

__all__ = [
    "Z95",
    "binary_entropy",
    "clipped_logit",
    "log_loss_terms",
    "norm_two_sided_p",
    "variance_from_sums",
    "weighted_quantile",
]

#: two-sided 95 % normal quantile, scipy.stats.norm.ppf(0.975)
Z95 = float(stats.norm.ppf(0.975))


def clipped_logit(p: np.ndarray) -> np.ndarray:
    """logit(min(max(p, ε), 1 − ε)), finite for p in [0, 1] (at most ±36.04)."""
    return logit(np.clip(p, EPS, 1.0 - EPS))


def log_loss_terms(y: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Per-observation clipped log-loss −[y ln p + (1 − y) ln(1 − p)], p in [ε, 1 − ε]."""
    pc = np.clip(p, EPS, 1.0 - EPS)
    # log1p keeps ln(1 − p) accurate for small p
    return -(y * np.log(pc) + (1.0 - y) * np.log1p(-pc))


def binary_entropy(p: np.ndarray) -> np.ndarray:
    """H(p) = −p ln p − (1 − p) ln(1 − p) with 0 ln 0 = 0 (xlogy)."""
    return -(xlogy(p, p) + xlogy(1.0 - p, 1.0 - p))


def variance_from_sums(n: float, s: float, ss: float) -> float:
    """Sample variance (ddof 1) of frequency-weighted data from n = Σw, Σwx, Σwx².

    Clamped at 0: when every value is equal, ss − s²/n cancels to rounding
    noise (of either sign) instead of 0; a residual below 1e-12·ss is treated
    as that noise, so equal inputs summed in different orders give the same 0.
    """
    if n <= 1.0:
        return math.nan
    resid = ss - s * s / n
    return 0.0 if resid <= 1e-12 * abs(ss) else resid / (n - 1.0)


def norm_two_sided_p(z: float) -> float:
    """Two-sided p-value of a standard normal statistic (scipy.stats.norm.sf)."""
    return float(2.0 * stats.norm.sf(abs(z)))


def _lerp(a: np.ndarray, b: np.ndarray, t: np.ndarray) -> np.ndarray:
    # the same two-sided formula numpy's quantile uses, so unit weights agree bit for bit
    d = b - a
    return np.where(t >= 0.5, b - d * (1.0 - t), a + d * t)


def weighted_quantile(
    values: np.ndarray, q: np.ndarray | float, weights: np.ndarray | None = None
) -> np.ndarray:
    """``numpy.quantile(values, q)`` (method 'linear') for frequency-weighted data.

    With integer weights this equals numpy's quantile of the data with each
    row repeated ``weight`` times; with unit weights it *is* numpy's quantile.
    The virtual index h = q·(N − 1), N = Σw, is located on the cumulative
    weights; non-integer weights extend the same rule.
    """
    v = np.asarray(values, dtype=np.float64)
    qa = np.asarray(q, dtype=np.float64)
    if weights is None or np.all(weights == 1.0):
        return np.asarray(np.quantile(v, qa))
    order = np.argsort(v, kind="mergesort")
    vs, ws = v[order], np.asarray(weights, dtype=np.float64)[order]
    cum = np.cumsum(ws)  # rows occupy positions [cum - w, cum) of the repeated data
    h = qa * (cum[-1] - 1.0)
    lo = np.floor(h)
    t = h - lo
    i_lo = np.minimum(np.searchsorted(cum, lo, side="right"), vs.size - 1)
    i_hi = np.minimum(np.searchsorted(cum, lo + 1.0, side="right"), vs.size - 1)
    return _lerp(vs[i_lo], vs[i_hi], t)
