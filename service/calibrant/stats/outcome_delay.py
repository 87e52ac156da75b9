"""The outcome delay distribution under right truncation (docs/methods.md §23).

A case scored ``T`` days ago whose outcome takes ``D`` days to be reported is
seen only when ``D ≤ T``: recent cases show only their quick outcomes, so the
plain empirical distribution of the reported delays is too short, and a
Kaplan-Meier curve over every case is wrong too when non-events never report
(implicit negatives). The product-limit estimator for right-truncated data
(Lynden-Bell 1971; Woodroofe 1985; the reverse-time hazard of Kalbfleisch &
Lawless 1989) uses the reported cases only:

    F̂(t) = Π_{s_j > t} (1 − d_j / R_j),   R_j = #{i : D_i ≤ s_j ≤ T_i},

over the distinct reported delays s_j, d_j of them equal to s_j. F̂ is the
distribution of D given D ≤ max T_i: delays longer than the longest look-back
cannot be seen, so the caller states that maximum.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# The grid a distribution is kept on: 0, then log-spaced from 15 minutes to the look-back.
GRID_POINTS = 256
GRID_START_DAYS = 1.0 / 96.0


@dataclass(frozen=True, slots=True)
class DelayDistribution:
    """F̂ on a grid of delays (days): ``cdf[k] = F̂(grid[k])``, non-decreasing, 1 at the end."""

    grid: np.ndarray
    cdf: np.ndarray
    n: int  # reported cases it was measured from

    def at(self, days: np.ndarray | float) -> np.ndarray:
        """F̂ at ``days``, linear between grid points (0 below 0, 1 beyond the grid)."""
        return np.interp(np.asarray(days, dtype=np.float64), self.grid, self.cdf, left=0.0, right=1.0)

    def quantile(self, q: float) -> float:
        """The smallest grid delay with F̂ ≥ q, interpolated linearly between grid points."""
        k = int(np.searchsorted(self.cdf, q, side="left"))
        if k == 0:
            return float(self.grid[0])
        if k >= self.grid.size:
            return float(self.grid[-1])
        lo, hi = self.cdf[k - 1], self.cdf[k]
        frac = 0.0 if hi == lo else (q - lo) / (hi - lo)
        return float(self.grid[k - 1] + frac * (self.grid[k] - self.grid[k - 1]))


def delay_grid(max_days: float) -> np.ndarray:
    return np.concatenate([[0.0], np.geomspace(GRID_START_DAYS, max_days, GRID_POINTS - 1)])


def right_truncated_cdf_steps(delay: np.ndarray, truncation: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The exact step function: (distinct delays s_j ascending, F̂(s_j)) by the formula above.

    ``truncation[i]`` is how long case i had to report (now − scored); a delay
    above its truncation cannot have been seen and is clipped to it.
    """
    d = np.asarray(delay, dtype=np.float64)
    t = np.maximum(np.asarray(truncation, dtype=np.float64), d)
    if d.size == 0:
        return np.empty(0), np.empty(0)
    s, counts = np.unique(d, return_counts=True)
    reported_by = np.searchsorted(np.sort(d), s, side="right")  # #{D_i ≤ s_j}
    gone_before = np.searchsorted(np.sort(t), s, side="left")  # #{T_i < s_j}; each such D_i < s_j too
    at_risk = reported_by - gone_before
    factor = 1.0 - counts / at_risk
    # F̂(s_j) = Π_{k > j} factor_k: a reversed cumulative product, shifted by one.
    tail = np.cumprod(factor[::-1])[::-1]
    cdf = np.append(tail[1:], 1.0)
    return s, cdf


def right_truncated_cdf(delay: np.ndarray, truncation: np.ndarray, *,
                        max_days: float) -> DelayDistribution | None:
    """F̂ of the reported delays (days) on :func:`delay_grid`; None when nothing was reported.

    Only cases with ``truncation ≤ max_days`` should be passed (the look-back); the
    step function is kept at each grid point (right-continuous, as F̂ is).
    """
    s, steps = right_truncated_cdf_steps(delay, truncation)
    if s.size == 0:
        return None
    grid = delay_grid(max_days)
    k = np.searchsorted(s, grid, side="right") - 1
    cdf = np.where(k >= 0, steps[np.clip(k, 0, None)], 0.0)
    return DelayDistribution(grid=grid, cdf=np.maximum.accumulate(cdf), n=int(np.asarray(delay).size))
