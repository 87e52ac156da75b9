"""Markov-chain approximation of CUSUM run lengths (Brook & Evans 1972).

The chart S_t = max(0, S_{t−1} + W_t) is a Markov process on [0, h] that is
absorbed once S > h. Discretising [0, h] into m states gives a sub-stochastic
transition matrix Q among the transient states, and the vector of average run
lengths L from every starting state solves

    (I − Q) L = 1;

L[0] is the zero-state ARL. For the risk-adjusted chart the increment W takes
two values per risk p (y = 0: −ln(1 + (R_A − 1) p); y = 1: ln R_A plus that)
and Q integrates over the distribution of risks [2]_, here an empirical sample.

Two discretisations are offered:

``"midpoint"``
    Brook & Evans' scheme as used by Steiner et al.: state j stands for the
    interval [(j − ½)δ, (j + ½)δ) with δ = 2h/(2m − 1), state 0 is the
    reflecting boundary [0, δ/2), and a move lands in the state whose
    interval contains S + W evaluated from the state's midpoint.
``"linear"`` (default)
    States are the grid points jδ, δ = h/(m − 1), with the last one at h; a
    move to S + W between two grid points is split between them in
    proportion to the distance (linear interpolation of the ARL function),
    so each increment's mean is kept exactly. Rounding to the nearest state
    biases the drift when the increments are comparable to δ — with rare
    events, −ln(1 + (R_A − 1) p) ≈ −p is tiny — and the split removes that
    first-order error. Moves above h are absorbed in both schemes.

Because the grid is uniform, a move from state i by an increment w lands at
i + w/δ: the landing offset does not depend on i, so Q is a Toeplitz matrix
except for its first column (everything pushed to or below 0) and its last
(nothing above h), and is built from one histogram of offsets.

References
----------
.. [1] Brook D, Evans DA (1972). An approach to the probability distribution
   of CUSUM run length. Biometrika 59(3):539–549. doi:10.1093/biomet/59.3.539
.. [2] Steiner SH, Cook RJ, Farewell VT, Treasure T (2000). Monitoring surgical
   performance using risk-adjusted cumulative sum charts. Biostatistics
   1(4):441–452. doi:10.1093/biostatistics/1.4.441
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Literal, cast

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike, NDArray

from calibrant.stats.cusum import _check_odds_ratio, _check_risks

__all__ = [
    "IncrementMix",
    "RefinedArl",
    "Scheme",
    "increment_mix",
    "markov_arl",
    "refined_markov_arl",
    "transition_matrix",
]

Scheme = Literal["linear", "midpoint"]

_EPS = float(np.finfo(np.float64).eps)
DEFAULT_POINTS = 1024  # logit bins for compressing a large risk sample
MIN_STATES = 10


@dataclass(frozen=True, slots=True)
class IncrementMix:
    """The distribution of the CUSUM weight W, compressed to K risk groups.

    Group k has probability ``mass[k]``; within it W = ``w1[k]`` with
    probability ``p_event[k]`` and ``w0[k]`` otherwise. ``n_risks`` counts
    the risks the mix was built from.
    """

    w0: NDArray[np.float64]
    w1: NDArray[np.float64]
    p_event: NDArray[np.float64]
    mass: NDArray[np.float64]
    n_risks: int
    r_a: float
    odds_ratio: float

    @property
    def drift(self) -> float:
        """E[W] per case: negative in control, so the chart returns to 0."""
        return float(np.sum(self.mass * (self.p_event * self.w1 + (1 - self.p_event) * self.w0)))


def increment_mix(
    risks: ArrayLike,
    r_a: float,
    odds_ratio: float = 1.0,
    max_points: int = DEFAULT_POINTS,
) -> IncrementMix:
    """Compress a risk sample into the weight distribution the chain needs.

    Parameters
    ----------
    risks : array of shape (n,), n ≥ 1
        Predicted risks resampled i.i.d. by the chart's model of the stream;
        clipped to [ε, 1 − ε] like the chart's own weights.
    r_a : alternative odds ratio of the chart (sets the weights).
    odds_ratio : true odds ratio of the stream (1 = in control); the event
        probability is q = OR p / (1 − p + OR p) while the weights stay those
        of p.
    max_points : samples with more risks are grouped into this many
        equal-width bins of logit(p); each group keeps its exact mass, its
        mean event probability and the conditional means of W given y = 0
        and y = 1, so the per-case drift E[W] is unchanged by compression.

    Raises
    ------
    ValueError
        For an empty sample (designing a chart needs the stream's risks) or
        risks outside [0, 1].
    """
    r_a = _check_odds_ratio(r_a)
    odds_ratio = float(odds_ratio)
    if not (math.isfinite(odds_ratio) and odds_ratio > 0.0):
        raise ValueError(f"odds_ratio must be finite and positive, got {odds_ratio!r}")
    p = np.clip(_check_risks(risks, "risks"), _EPS, 1.0 - _EPS)
    n = p.shape[0]
    if n == 0:
        raise ValueError("risks is empty: a chart can only be designed from a sample of risks")
    if max_points < 1:
        raise ValueError("max_points must be at least 1")
    w0 = -np.log1p((r_a - 1.0) * p)
    w1 = math.log(r_a) + w0
    denom = 1.0 - p + odds_ratio * p
    q, not_q = odds_ratio * p / denom, (1.0 - p) / denom  # not_q avoids 1 − q cancelling to 0
    if n <= max_points:
        return IncrementMix(w0, w1, q, np.full(n, 1.0 / n), n, r_a, odds_ratio)

    x = np.log(p) - np.log1p(-p)
    lo, span = float(x.min()), float(x.max() - x.min())
    if span == 0.0:
        group = np.zeros(n, dtype=np.int64)
    else:
        group = np.minimum(((x - lo) / span * max_points).astype(np.int64), max_points - 1)

    def per_group(values: NDArray[np.float64]) -> NDArray[np.float64]:
        # numpy's stubs type bincount as integer counts; with float weights it returns float64.
        return cast(NDArray[np.float64], np.bincount(group, weights=values, minlength=max_points))

    count = np.bincount(group, minlength=max_points).astype(np.float64)
    keep = count > 0
    sum_q, sum_not_q = per_group(q)[keep], per_group(not_q)[keep]
    return IncrementMix(
        w0=per_group(not_q * w0)[keep] / sum_not_q,
        w1=per_group(q * w1)[keep] / sum_q,
        p_event=sum_q / (sum_q + sum_not_q),
        mass=count[keep] / n,
        n_risks=n,
        r_a=r_a,
        odds_ratio=odds_ratio,
    )


def transition_matrix(
    h: float, mix: IncrementMix, n_states: int, scheme: Scheme = "linear"
) -> NDArray[np.float64]:
    """Sub-stochastic matrix Q (n_states × n_states) among the chart's transient states.

    Row i sums to 1 minus the probability of signalling on the next case.
    """
    if not (math.isfinite(h) and h > 0.0):
        raise ValueError(f"h must be finite and positive, got {h!r}")
    m = int(n_states)
    if m < MIN_STATES:
        raise ValueError(f"n_states must be at least {MIN_STATES}")
    if scheme == "midpoint":
        delta = 2.0 * h / (2 * m - 1)
    elif scheme == "linear":
        delta = h / (m - 1)
    else:
        raise ValueError(f"scheme must be 'linear' or 'midpoint', got {scheme!r}")

    w = np.concatenate([mix.w0, mix.w1])
    prob = np.concatenate([mix.mass * (1.0 - mix.p_event), mix.mass * mix.p_event])
    u = w / delta
    if scheme == "midpoint":
        k, frac = np.floor(u + 0.5), np.zeros_like(u)
    else:
        k = np.floor(u)
        frac = u - k
    # Offsets beyond ±m act alike from every state (all to 0, or all absorbed).
    idx = (np.clip(k, -m, m) + m).astype(np.int64)
    size = 2 * m + 1
    near = np.bincount(idx, weights=prob * (1.0 - frac), minlength=size)  # to state i + k
    far = np.bincount(idx, weights=prob * frac, minlength=size)  # to state i + k + 1
    exact = np.bincount(idx, weights=prob * (frac == 0.0), minlength=size)  # lands on i + k

    i = np.arange(m)[:, None]
    offset = np.arange(m)[None, :] - i  # j − i
    Q = near[offset + m] + far[offset - 1 + m]
    # Last state: landing between h and h + δ is a signal, so only exact hits stay.
    Q[:, m - 1] = exact[offset[:, m - 1] + m] + far[offset[:, m - 1] - 1 + m]
    # First state: every landing at or below 0 is reflected to 0.
    below = np.cumsum(near + far)  # below[t]: total mass with offset index ≤ t
    rows = np.arange(m)
    Q[:, 0] = below[m - rows - 1] + near[m - rows]
    return Q


def markov_arl(
    h: float,
    mix: IncrementMix,
    n_states: int = 400,
    scheme: Scheme = "linear",
) -> float:
    """Zero-state average run length of the chart with limit h, in cases.

    Solves (I − Q) L = 1 and returns L[0] [1]_. In control (``mix`` built with
    odds_ratio = 1) this is ARL0; for a shifted mix it is the zero-state ARL1.
    Returns ``math.inf`` when the chain is (numerically) never absorbed, for
    example when no risk can produce an event. I − Q has a smallest singular
    value of order 1/ARL, so ARLs beyond about 1e12 are not resolved precisely.
    """
    Q = transition_matrix(h, mix, n_states, scheme)
    a = np.eye(Q.shape[0]) - Q
    with warnings.catch_warnings():
        # Ill-conditioning is expected for long run lengths; the check below decides.
        warnings.simplefilter("ignore", scipy.linalg.LinAlgWarning)
        try:
            arl = scipy.linalg.solve(a, np.ones(Q.shape[0]), check_finite=False)
        except np.linalg.LinAlgError:
            return math.inf
    value = float(arl[0])
    return value if math.isfinite(value) and value >= 1.0 else math.inf


@dataclass(frozen=True, slots=True)
class RefinedArl:
    """Linear-scheme ARL at m and 2m states and their Richardson extrapolation.

    The linear scheme's error in ln ARL falls like 1/m² (observed on the
    Beta(2, 8) and rare-event mixes in the tests), so

        ln L ≈ ln L_2m + (ln L_2m − ln L_m) / 3.

    ``relative_change`` = |L_2m / L_m − 1| is the accuracy check: a large value
    says the grid is too coarse for this risk mix and limit.
    """

    value: float
    coarse: float
    fine: float
    n_states: int

    @property
    def relative_change(self) -> float:
        if math.isinf(self.coarse) or math.isinf(self.fine):
            return math.inf
        return abs(self.fine / self.coarse - 1.0)


def refined_markov_arl(h: float, mix: IncrementMix, n_states: int = 400) -> RefinedArl:
    """Zero-state ARL from the linear scheme at m and 2m states, extrapolated."""
    coarse = markov_arl(h, mix, n_states, "linear")
    fine = markov_arl(h, mix, 2 * n_states, "linear")
    if math.isinf(coarse) or math.isinf(fine):
        value = math.inf
    else:
        value = math.exp(math.log(fine) + (math.log(fine) - math.log(coarse)) / 3.0)
    return RefinedArl(value=value, coarse=coarse, fine=fine, n_states=int(n_states))
