"""Monte-Carlo run lengths of the risk-adjusted CUSUM, vectorised over paths.

Cross-check for the Markov-chain design (docs/methods.md §18, steps 2–3): draw risks
i.i.d. from the stream's empirical sample, outcomes y ~ Bernoulli(q) with
q = OR p / (1 − p + OR p) (OR = 1 in control), and run the chart on many
independent paths at once. S_t does not depend on h, so one path gives the
first-passage time (first t with S_t > h) for every h on a grid.

The run length is close to geometric, so the Monte-Carlo standard error of
the mean is about ARL/√N for N paths.

References
----------
.. [1] Steiner SH, Cook RJ, Farewell VT, Treasure T (2000). Monitoring surgical
   performance using risk-adjusted cumulative sum charts. Biostatistics
   1(4):441–452. doi:10.1093/biostatistics/1.4.441
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from calibrant.stats.cusum import _check_odds_ratio, _check_risks, odds_shifted_risk

__all__ = ["SimulatedArl", "simulate_first_passage", "simulated_arl"]

_EPS = float(np.finfo(np.float64).eps)
_BLOCK_CELLS = 1 << 21  # paths × cases per block: bounds memory (~16 MiB per float array)
DEFAULT_MAX_CASES = 50_000_000


@dataclass(frozen=True, slots=True)
class SimulatedArl:
    """Mean run length over ``n_paths`` simulated paths, with its standard error."""

    h: float
    r_a: float
    odds_ratio: float
    mean: float
    se: float
    median: float
    n_paths: int
    seed: int | None


def simulate_first_passage(
    risks: ArrayLike,
    r_a: float,
    h_grid: ArrayLike,
    n_paths: int,
    rng: np.random.Generator,
    *,
    odds_ratio: float = 1.0,
    max_cases: int = DEFAULT_MAX_CASES,
) -> NDArray[np.int64]:
    """First-passage times (1-based case numbers) of simulated chart paths.

    Parameters
    ----------
    risks : sample of predicted risks, resampled i.i.d. with replacement.
    r_a : alternative odds ratio of the chart.
    h_grid : ascending control limits (all > 0).
    n_paths : number of independent paths.
    rng : numpy Generator; the result is reproducible for a given seed.
    odds_ratio : true odds ratio of the simulated stream from case 1 on.
    max_cases : give up (ValueError) if a path has not passed max(h_grid)
        after this many cases, rather than return censored run lengths.

    Returns
    -------
    int64 array of shape (n_paths, len(h_grid)).
    """
    r_a = _check_odds_ratio(r_a)
    p = np.clip(_check_risks(risks, "risks"), _EPS, 1.0 - _EPS)
    if p.shape[0] == 0:
        raise ValueError("risks is empty: nothing to resample")
    grid = np.asarray(h_grid, dtype=np.float64)
    if grid.ndim != 1 or grid.size == 0 or np.any(grid <= 0) or np.any(np.diff(grid) < 0):
        raise ValueError("h_grid must be a non-empty ascending array of positive limits")
    if n_paths < 1:
        raise ValueError("n_paths must be at least 1")

    w0 = -np.log1p((r_a - 1.0) * p)  # weight when y = 0, per risk
    q = odds_shifted_risk(p, odds_ratio)
    log_r = math.log(r_a)

    passage = np.zeros((n_paths, grid.size), dtype=np.int64)
    s = np.zeros(n_paths)
    active = np.arange(n_paths)
    done_cases = 0
    while active.size:
        if done_cases >= max_cases:
            raise ValueError(f"{active.size} paths had not signalled after {max_cases} cases")
        na = active.size
        block = max(256, _BLOCK_CELLS // na)
        pick = rng.integers(0, p.shape[0], size=(na, block))
        w = w0[pick] + log_r * (rng.random((na, block)) < q[pick])
        # Lindley recursion along each row (see cusum._lindley_path): S from cumulative sums.
        c = s[active, None] + np.cumsum(w, axis=1)
        path = c - np.minimum(np.minimum.accumulate(c, axis=1), 0.0)
        # Running maximum is non-decreasing, so "first t with S_t > h" is a count of t with max ≤ h.
        top = np.maximum.accumulate(path, axis=1)
        for g, h in enumerate(grid):
            newly = (top[:, -1] > h) & (passage[active, g] == 0)
            if newly.any():
                rows = np.flatnonzero(newly)
                first = np.argmax(top[rows] > h, axis=1)
                passage[active[rows], g] = done_cases + first + 1
        s[active] = path[:, -1]
        done_cases += block
        active = active[passage[active, -1] == 0]
    return passage


def simulated_arl(
    risks: ArrayLike,
    r_a: float,
    h: float,
    *,
    n_paths: int = 2000,
    seed: int | None = None,
    odds_ratio: float = 1.0,
) -> SimulatedArl:
    """Zero-state ARL at limit h by simulation, with Monte-Carlo SE sd/√N.

    ``seed`` feeds ``numpy.random.default_rng``; record it with the result so
    the check can be repeated exactly.
    """
    if n_paths < 2:
        raise ValueError("n_paths must be at least 2 for a standard error")
    rng = np.random.default_rng(seed)
    passage = simulate_first_passage(risks, r_a, [h], n_paths, rng, odds_ratio=odds_ratio)
    rl = passage[:, 0].astype(np.float64)
    se = float(rl.std(ddof=1) / math.sqrt(n_paths))
    return SimulatedArl(
        h=float(h),
        r_a=float(r_a),
        odds_ratio=float(odds_ratio),
        mean=float(rl.mean()),
        se=se,
        median=float(np.median(rl)),
        n_paths=int(n_paths),
        seed=seed,
    )
