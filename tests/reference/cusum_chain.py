"""Risk-adjusted CUSUM references: the plain case-by-case chart and Brook & Evans' chain.

The chart (Steiner, Cook, Farewell & Treasure 2000): W_t = y_t ln R − ln(1 − p_t + R p_t),
S_t = max(0, S_{t−1} + W_t), signal at the first S_t > h.

The chain (Brook & Evans 1972) with midpoint states: m states, width
δ = 2h/(2m − 1); state j stands for S = jδ and covers [(j − ½)δ, (j + ½)δ),
state 0 covers [0, δ/2); from state i a case moves S to iδ + W, which lands
in state round((iδ + W)/δ) (everything at or below 0 in state 0) or, at
(m − ½)δ = h or above, signals. ARL from (I − Q)L = 1, L[0].
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from tests.reference.recipes import beta_2_8_points


def plain_chart(p: np.ndarray, y: np.ndarray, r_a: float, h: float) -> dict[str, float | int | None]:
    """One Python loop over the stream in index order, no reset."""
    eps = float(np.finfo(np.float64).eps)
    s, max_s, argmax, first = 0.0, 0.0, 0, None
    for t, (pt, yt) in enumerate(zip(p.tolist(), y.tolist(), strict=True), start=1):
        pc = min(max(pt, eps), 1.0 - eps)
        s = max(0.0, s + yt * math.log(r_a) - math.log(1.0 - pc + r_a * pc))
        if s > max_s:
            max_s, argmax = s, t
        if first is None and s > h:
            first = t
    return {"final_S": s, "max_S": max_s, "argmax_1based": argmax, "h_used": h,
            "first_signal_1based": first}


def midpoint_arl(h: float, r_a: float, m: int, odds_ratio: float = 1.0) -> float:
    """Zero-state ARL of the chart on Beta(2, 8) quantile risks; true odds × ``odds_ratio``."""
    p = beta_2_8_points()
    delta = 2.0 * h / (2 * m - 1)
    w0 = -np.log1p((r_a - 1.0) * p)
    q = odds_ratio * p / (1.0 - p + odds_ratio * p)
    w = np.r_[w0, w0 + math.log(r_a)]
    prob = np.r_[1.0 - q, q] / p.size
    to = np.maximum(np.floor((np.arange(m)[:, None] * delta + w[None, :]) / delta + 0.5), 0)
    stay = to < m
    rows = np.broadcast_to(np.arange(m)[:, None], to.shape)[stay]
    flat = rows * m + to[stay].astype(np.int64)
    Q = np.bincount(flat, np.broadcast_to(prob, to.shape)[stay], m * m).reshape(m, m)
    return float(np.linalg.solve(np.eye(m) - Q, np.ones(m))[0])


def midpoint_h(r_a: float, m: int, target: float = 10_000.0) -> float:
    """Root of ln ARL0(h) = ln target by brentq on [4, 7], xtol 1e-7."""
    return float(brentq(lambda h: math.log(midpoint_arl(h, r_a, m)) - math.log(target),
                        4.0, 7.0, xtol=1e-7))
