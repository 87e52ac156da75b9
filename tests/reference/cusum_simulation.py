"""Monte-Carlo run lengths of the risk-adjusted CUSUM on Beta(2, 8) risks, plain numpy.

Risks are drawn i.i.d. (uniformly) from the 2000 Beta(2, 8) quantile
points, outcomes y ~ Bernoulli(q) with q = OR p/(1 − p + OR p) (OR = 1 in
control), every chart starts at S = 0 on the first case. Paths advance in
blocks of cases; within a block S comes from the reflected cumulative sum
S_t = C_t − min(0, min_{s≤t} C_s), and a limit h is passed at the first t
whose running maximum of S exceeds h.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tests.reference.recipes import SEED, beta_2_8_points

N_RUNS = 4000
N_RUNS_TWO_CHARTS = 2000
TARGET_ARL0 = 10_000.0
SEARCH_GRID = np.round(np.arange(5.20, 6.2001, 0.02), 2)
_BLOCK = 2048


@dataclass(frozen=True)
class Chart:
    r_a: float
    limits: tuple[float, ...]  # ascending


def first_passages(rng: np.random.Generator, charts: list[Chart], n_paths: int,
                   odds_ratio: float = 1.0, *, stop_at_first: bool = False) -> list[np.ndarray]:
    """First case number (1-based) at which each chart passes each of its limits, per path.

    All charts read the same simulated stream; a path stops once every chart
    has passed its largest limit, or with ``stop_at_first`` once any chart has
    (the others then keep 0 for "not passed").
    """
    p = beta_2_8_points()
    q = odds_ratio * p / (1.0 - p + odds_ratio * p)
    w0 = [-np.log1p((c.r_a - 1.0) * p) for c in charts]
    out = [np.zeros((n_paths, len(c.limits)), dtype=np.int64) for c in charts]
    s = [np.zeros(n_paths) for _ in charts]
    alive, done_cases = np.arange(n_paths), 0
    while alive.size:
        pick = rng.integers(0, p.size, size=(alive.size, _BLOCK))
        event = rng.random((alive.size, _BLOCK)) < q[pick]
        for c, chart in enumerate(charts):
            walk = s[c][alive, None] + np.cumsum(w0[c][pick] + math.log(chart.r_a) * event, axis=1)
            path = walk - np.minimum(np.minimum.accumulate(walk, axis=1), 0.0)
            top = np.maximum.accumulate(path, axis=1)
            for j, h in enumerate(chart.limits):
                new = np.flatnonzero((out[c][alive, j] == 0) & (top[:, -1] > h))
                out[c][alive[new], j] = done_cases + np.argmax(top[new] > h, axis=1) + 1
            s[c][alive] = path[:, -1]
        done_cases += _BLOCK
        passed = [o[alive, -1] > 0 for o in out]
        finished = np.logical_or.reduce(passed) if stop_at_first else np.logical_and.reduce(passed)
        alive = alive[~finished]
    return out


def _mean_se(run_lengths: np.ndarray) -> dict[str, float | int]:
    n = run_lengths.size
    return {"mean": float(run_lengths.mean()),
            "se": float(run_lengths.std(ddof=1) / math.sqrt(n)), "n_runs": int(n)}


def searched_limit(rng: np.random.Generator, r_a: float) -> float:
    """h with simulated ARL0 = target: ln ARL0 interpolated linearly on SEARCH_GRID."""
    runs = first_passages(rng, [Chart(r_a, tuple(SEARCH_GRID))], N_RUNS)[0]
    log_arl = np.log(runs.mean(axis=0))
    i = int(np.searchsorted(log_arl, math.log(TARGET_ARL0)))
    if not 0 < i < SEARCH_GRID.size:
        raise RuntimeError("the target ARL0 lies outside the search grid")
    frac = (math.log(TARGET_ARL0) - log_arl[i - 1]) / (log_arl[i] - log_arl[i - 1])
    return float(SEARCH_GRID[i - 1] + frac * (SEARCH_GRID[i] - SEARCH_GRID[i - 1]))


def simulate(limits: dict[str, float]) -> dict[str, object]:
    """Search, verification, zero-state ARL1 and the two-chart run, all from one seeded generator.

    ``limits``: the h at which the verification runs use ("upper", "lower").
    Order of use of the generator: search upper, search lower, verify upper,
    verify lower, ARL1 upper (OR 2), ARL1 lower (OR ½), both charts together.
    """
    rng = np.random.default_rng(SEED)
    searched = {"upper": searched_limit(rng, 2.0), "lower": searched_limit(rng, 0.5)}
    result: dict[str, object] = {"searched_h": searched}
    for side, r_a in (("upper", 2.0), ("lower", 0.5)):
        runs = first_passages(rng, [Chart(r_a, (limits[side],))], N_RUNS)[0][:, 0]
        result[f"{side}_arl0"] = _mean_se(runs)
    for side, r_a in (("upper", 2.0), ("lower", 0.5)):
        runs = first_passages(rng, [Chart(r_a, (limits[side],))], N_RUNS, odds_ratio=r_a)[0][:, 0]
        result[f"{side}_arl1"] = _mean_se(runs)
    up, low = first_passages(
        rng, [Chart(2.0, (limits["upper"],)), Chart(0.5, (limits["lower"],))], N_RUNS_TWO_CHARTS,
        stop_at_first=True)
    never = np.iinfo(np.int64).max
    first = np.minimum(np.where(up[:, 0] > 0, up[:, 0], never), np.where(low[:, 0] > 0, low[:, 0], never))
    result["two_charts"] = _mean_se(first)
    return result
