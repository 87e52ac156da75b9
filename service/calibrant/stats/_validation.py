"""Input checks shared by every array statistic.

Invalid input (wrong shapes, labels other than 0/1, probabilities outside
[0, 1] or not finite, negative or non-finite weights) raises ``ValueError``
with a message naming the argument. Degenerate but valid input (empty, one
class, all p = ½) passes: each statistic turns it into a result whose status
says why there is no number.

Everything is cast to float64 first. float32 arithmetic is never used: it
clips log-loss at 1.19e-7 instead of 2.22e-16 and stores any p above
1 − 2.98e-8 as exactly 1 (docs/methods.md §1.2).

Weights are *frequency* weights: an integer weight k means the row occurs k
times, weight 0 drops the row, unit weights equal no weights. Rows with zero
weight are removed here, so no statistic ever sees them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "EPS",
    "Labeled",
    "Scores",
    "as_counts",
    "as_labeled",
    "as_scores",
    "check_closed",
    "check_n_bins",
    "check_strategy",
]

#: float64 machine epsilon, the log-loss clipping constant (docs/methods.md §1.2).
EPS = float(np.finfo(np.float64).eps)


@dataclass(frozen=True, slots=True)
class Labeled:
    """Validated labels, probabilities and positive frequency weights (float64, 1-D)."""

    y: np.ndarray
    p: np.ndarray
    w: np.ndarray
    unit_weights: bool  # True when no weights were given or all were 1

    @property
    def n(self) -> float:
        return float(self.w.sum())

    @property
    def n1(self) -> float:
        return float(self.w @ self.y)

    @property
    def n0(self) -> float:
        return float(self.w @ (1.0 - self.y))


@dataclass(frozen=True, slots=True)
class Scores:
    """Validated scores and positive frequency weights, for label-free statistics."""

    p: np.ndarray
    w: np.ndarray
    unit_weights: bool

    @property
    def n(self) -> float:
        return float(self.w.sum())


def _as_1d_float(x: ArrayLike, name: str) -> np.ndarray:
    try:
        a = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name} must be numeric: {exc}") from exc
    if a.ndim == 0:
        raise ValueError(f"{name} must be a 1-D array, got a scalar")
    if a.ndim == 2 and a.shape[1] == 1:  # a column vector is accepted
        a = a[:, 0]
    if a.ndim != 1:
        raise ValueError(f"{name} must be a 1-D array, got shape {a.shape}")
    return a


def _check_proba(p: np.ndarray, name: str) -> None:
    if not np.all(np.isfinite(p)):
        raise ValueError(f"{name} contains NaN or infinity")
    if p.size and (p.min() < 0.0 or p.max() > 1.0):
        raise ValueError(f"{name} must lie in [0, 1]; got range [{p.min()!r}, {p.max()!r}]")


def _weights(sample_weight: ArrayLike | None, size: int, name: str) -> tuple[np.ndarray, bool]:
    if sample_weight is None:
        return np.ones(size), True
    w = _as_1d_float(sample_weight, name)
    if w.shape[0] != size:
        raise ValueError(f"{name} has length {w.shape[0]}, expected {size}")
    if not np.all(np.isfinite(w)):
        raise ValueError(f"{name} contains NaN or infinity")
    if w.size and w.min() < 0.0:
        raise ValueError(f"{name} must be non-negative")
    return w, bool(np.all(w == 1.0))


def as_labeled(
    y_true: ArrayLike,
    y_proba: ArrayLike,
    sample_weight: ArrayLike | None = None,
) -> Labeled:
    """Validate ``(y_true, y_proba, sample_weight)``; drop zero-weight rows."""
    y = _as_1d_float(y_true, "y_true")
    p = _as_1d_float(y_proba, "y_proba")
    if y.shape[0] != p.shape[0]:
        raise ValueError(f"y_true has length {y.shape[0]} but y_proba has length {p.shape[0]}")
    if not np.all((y == 0.0) | (y == 1.0)):
        raise ValueError("y_true must contain only 0 and 1 (positive class = 1)")
    _check_proba(p, "y_proba")
    w, unit = _weights(sample_weight, y.shape[0], "sample_weight")
    if not unit:
        keep = w > 0.0
        if not keep.all():
            y, p, w = y[keep], p[keep], w[keep]
            unit = bool(np.all(w == 1.0))
    return Labeled(y=y, p=p, w=w, unit_weights=unit)


def as_scores(
    y_proba: ArrayLike,
    sample_weight: ArrayLike | None = None,
    *,
    name: str = "y_proba",
    weight_name: str = "sample_weight",
    check_unit_interval: bool = True,
) -> Scores:
    """Validate label-free scores (probabilities by default) and their weights."""
    p = _as_1d_float(y_proba, name)
    if check_unit_interval:
        _check_proba(p, name)
    elif not np.all(np.isfinite(p)):
        raise ValueError(f"{name} contains NaN or infinity")
    w, unit = _weights(sample_weight, p.shape[0], weight_name)
    if not unit:
        keep = w > 0.0
        if not keep.all():
            p, w = p[keep], w[keep]
            unit = bool(np.all(w == 1.0))
    return Scores(p=p, w=w, unit_weights=unit)


def as_counts(counts: ArrayLike, name: str) -> np.ndarray:
    """Validate a histogram: 1-D, finite, non-negative float64 counts."""
    c = _as_1d_float(counts, name)
    if not np.all(np.isfinite(c)):
        raise ValueError(f"{name} contains NaN or infinity")
    if c.size and c.min() < 0.0:
        raise ValueError(f"{name} must be non-negative")
    return c


def check_n_bins(n_bins: int) -> int:
    if isinstance(n_bins, bool) or not isinstance(n_bins, int | np.integer) or n_bins < 1:
        raise ValueError(f"n_bins must be a positive integer, got {n_bins!r}")
    return int(n_bins)


def check_strategy(strategy: str) -> str:
    if strategy not in ("uniform", "quantile"):
        raise ValueError(f"strategy must be 'uniform' or 'quantile', got {strategy!r}")
    return strategy


def check_closed(closed: str) -> str:
    if closed not in ("right", "left"):
        raise ValueError(f"closed must be 'right' or 'left', got {closed!r}")
    return closed
