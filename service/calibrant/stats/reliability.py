"""Reliability-diagram data: per bin mean predicted risk, observed event rate,
weight and a Wilson 95 % interval for the observed rate."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from calibrant.stats._binning import assign_bins, bin_sums, calibration_bin_edges
from calibrant.stats._numerics import Z95
from calibrant.stats._validation import as_labeled, check_closed, check_n_bins, check_strategy
from calibrant.stats.result import Status

__all__ = [
    "ReliabilityBin",
    "ReliabilityDiagram",
    "reliability_diagram",
    "reliability_from_bin_sums",
    "wilson_interval",
]


def wilson_interval(successes: float, n: float, *, z: float = Z95) -> tuple[float, float] | None:
    """Wilson score interval for a binomial proportion; ``None`` when n = 0.

        centre = (p̂ + z²/(2n)) / (1 + z²/n),
        half   = z / (1 + z²/n) · sqrt(p̂(1 − p̂)/n + z²/(4n²)),

    clipped to [0, 1]. Unlike the Wald interval it has sensible coverage near
    0 and 1 and is never degenerate at p̂ ∈ {0, 1}. Same as statsmodels
    ``proportion_confint(method="wilson")``. With frequency weights n = Σw.

    Reference: Wilson EB (1927), Probable inference, the law of succession, and
    statistical inference, JASA 22(158):209–212 [M, from memory].
    """
    if not n > 0:
        return None
    ph = successes / n
    z2 = z * z
    denom = 1.0 + z2 / n
    centre = (ph + z2 / (2.0 * n)) / denom
    half = z / denom * math.sqrt(max(ph * (1.0 - ph) / n + z2 / (4.0 * n * n), 0.0))
    return max(centre - half, 0.0), min(centre + half, 1.0)


@dataclass(frozen=True, slots=True)
class ReliabilityBin:
    """One bin; the means and interval are ``None`` for an empty bin."""

    lower: float
    upper: float
    count: float
    mean_predicted: float | None
    observed_rate: float | None
    ci_low: float | None
    ci_high: float | None


@dataclass(frozen=True, slots=True)
class ReliabilityDiagram:
    """All bins in order (empty ones included), with the binning that produced them."""

    status: Status
    reason: str
    n: float
    bins: tuple[ReliabilityBin, ...]
    strategy: str
    closed: str
    interval: str = "wilson_95"

    @property
    def measured(self) -> bool:
        return self.status is Status.MEASURED


def reliability_from_bin_sums(
    edges: ArrayLike,
    counts: ArrayLike,
    sum_p: ArrayLike,
    sum_y: ArrayLike,
    *,
    strategy: str = "uniform",
    closed: str = "right",
) -> ReliabilityDiagram:
    """Reliability diagram from per-bin weight, Σp and Σy on the given edges."""
    e, c, sp, sy = (np.asarray(a, dtype=np.float64) for a in (edges, counts, sum_p, sum_y))
    bins = []
    for k in range(c.size):
        if c[k] > 0:
            ci = wilson_interval(float(sy[k]), float(c[k]))
            bins.append(ReliabilityBin(float(e[k]), float(e[k + 1]), float(c[k]),
                                       float(sp[k] / c[k]), float(sy[k] / c[k]), *ci))  # type: ignore[misc]
        else:
            bins.append(ReliabilityBin(float(e[k]), float(e[k + 1]), 0.0, None, None, None, None))
    n = float(c.sum())
    status, reason = (Status.MEASURED, "") if n > 0 else (Status.NO_VALUE, "empty window")
    return ReliabilityDiagram(status, reason, n, tuple(bins), strategy, closed)


def reliability_diagram(
    y_true: ArrayLike,
    y_proba: ArrayLike,
    *,
    sample_weight: ArrayLike | None = None,
    n_bins: int = 10,
    strategy: str = "uniform",
    closed: str = "right",
) -> ReliabilityDiagram:
    """Data for a reliability diagram: per bin mean p, observed rate, weight, Wilson 95 % interval.

    Bins as in :func:`calibrant.stats.calibration_error.expected_calibration_error`:
    ``strategy="uniform"`` (edges k/B) or ``"quantile"`` (percentiles of p),
    ``closed="right"`` = ``sklearn.calibration.calibration_curve``'s rule. The
    non-empty bins' (observed_rate, mean_predicted) equal calibration_curve's
    (prob_true, prob_pred). Quantile edges are exact sample percentiles, so the
    first and last bins end at min(p) and max(p).

    Edge cases: empty → status undefined with all bins empty.

    References: Wilson (1927), JASA 22(158):209–212 [M, from memory];
    Naeini, Cooper & Hauskrecht (2015); docs/methods.md §12.
    """
    n_bins = check_n_bins(n_bins)
    strategy = check_strategy(strategy)
    closed = check_closed(closed)
    d = as_labeled(y_true, y_proba, sample_weight)
    edges = calibration_bin_edges(d.p, d.w, n_bins=n_bins, strategy=strategy)
    ids = assign_bins(d.p, edges, closed=closed)
    c, sp, sy = bin_sums(ids, n_bins, d.w, d.w * d.p, d.w * d.y)
    return reliability_from_bin_sums(edges, c, sp, sy, strategy=strategy, closed=closed)
