"""Probability bins shared by ECE/MCE, reliability diagrams and the Murphy decomposition."""

from __future__ import annotations

from typing import Literal

import numpy as np

from calibrant.stats._numerics import weighted_quantile

__all__ = ["assign_bins", "bin_sums", "calibration_bin_edges"]


def calibration_bin_edges(
    p: np.ndarray, w: np.ndarray, *, n_bins: int, strategy: str
) -> np.ndarray:
    """``n_bins + 1`` edges on [0, 1].

    ``uniform``: k / n_bins. ``quantile``: the (weighted) percentiles of p at
    k / n_bins with linear interpolation, exactly as
    ``sklearn.calibration.calibration_curve`` computes them
    (``np.percentile(p, linspace(0, 1, n_bins + 1) * 100)``); ties give
    duplicate edges and hence empty bins.
    """
    if strategy == "uniform" or p.size == 0:
        return np.linspace(0.0, 1.0, n_bins + 1)
    pct = np.linspace(0.0, 1.0, n_bins + 1) * 100
    if np.all(w == 1.0):
        return np.percentile(p, pct)
    return weighted_quantile(p, pct / 100, w)


def assign_bins(p: np.ndarray, edges: np.ndarray, *, closed: str) -> np.ndarray:
    """Bin index 0 … len(edges) − 2 of every p.

    ``closed="right"``: bins (e_k, e_{k+1}], first bin [e_0, e_1] — the rule of
    ``sklearn.calibration.calibration_curve`` (``np.searchsorted(edges[1:-1], p)``).
    ``closed="left"``: bins [e_k, e_{k+1}), last bin closed — the ``np.histogram``
    rule, and the one the mergeable summary's fine grid uses.
    Values below the first or above the last edge go to the end bins.
    """
    side: Literal["left", "right"] = "left" if closed == "right" else "right"
    return np.searchsorted(edges[1:-1], p, side=side)


def bin_sums(ids: np.ndarray, n_bins: int, *columns: np.ndarray) -> list[np.ndarray]:
    """Per-bin sums ``np.bincount(ids, weights=c)`` of every column (weights pre-multiplied)."""
    return [np.bincount(ids, weights=c, minlength=n_bins).astype(np.float64) for c in columns]
