"""Risk-adjusted Bernoulli CUSUM chart: weights, resumable state, batch update.

For case t with predicted risk p_t and outcome y_t, the log-likelihood ratio of
"the true odds are R_A times the model's odds" against "the model is right" is

    W_t = y_t ln R_A − ln(1 − p_t + R_A p_t)

and the chart is

    S_0 = 0,   S_t = max(0, S_{t−1} + W_t),   signal at the first t with S_t > h.

R_A > 1 (default 2) watches for more events than predicted (deterioration);
R_A < 1 (default ½) for fewer (over-prediction). Both use the same recursion;
drawing the second one below the axis is only a display convention.

The state is a small frozen record that can be written to JSON and resumed;
``advance`` consumes a batch of mature cases in their defined order. After a
signal the chart keeps running until a person resolves the alarm and calls
``reset`` (optionally with a new h designed for the current risk mix).

Processing a day's cases one by one is the chart above; adding a day's weights
in one step would be a different chart with a different run length.

References
----------
.. [1] Steiner SH, Cook RJ, Farewell VT, Treasure T (2000). Monitoring surgical
   performance using risk-adjusted cumulative sum charts. Biostatistics
   1(4):441–452. doi:10.1093/biostatistics/1.4.441
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "LOWER_ODDS_RATIO",
    "UPPER_ODDS_RATIO",
    "CusumState",
    "CusumStep",
    "advance",
    "cusum_weights",
    "new_chart",
    "odds_shifted_risk",
    "reset",
]

UPPER_ODDS_RATIO = 2.0  # common practice: detect a doubling of the odds (Steiner et al. 2000)
LOWER_ODDS_RATIO = 0.5  # common practice: detect a halving of the odds

_EPS = float(np.finfo(np.float64).eps)  # clipping policy of docs/methods.md §1.2: [ε, 1 − ε]


def _check_odds_ratio(r_a: float) -> float:
    r_a = float(r_a)
    if not (math.isfinite(r_a) and r_a > 0.0) or r_a == 1.0:
        raise ValueError(f"r_a must be a finite positive odds ratio other than 1, got {r_a!r}")
    return r_a


def _check_risks(y_proba: ArrayLike, name: str = "y_proba") -> NDArray[np.float64]:
    p = np.asarray(y_proba, dtype=np.float64)
    if p.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {p.shape}")
    if not np.all(np.isfinite(p)) or np.any((p < 0.0) | (p > 1.0)):
        raise ValueError(f"{name} must hold finite probabilities in [0, 1]")
    return p


def _check_outcomes(y_true: ArrayLike, n: int) -> NDArray[np.float64]:
    y = np.asarray(y_true)
    if y.ndim != 1 or y.shape[0] != n:
        raise ValueError(f"y_true must be one-dimensional with {n} entries, got shape {y.shape}")
    yf = y.astype(np.float64)
    if not np.all((yf == 0.0) | (yf == 1.0)):
        raise ValueError("y_true must hold only 0 and 1 (or False and True)")
    return yf


def cusum_weights(y_proba: ArrayLike, y_true: ArrayLike, r_a: float) -> NDArray[np.float64]:
    """Log-likelihood-ratio weights W_t = y_t ln R_A − ln(1 − p_t + R_A p_t).

    Parameters
    ----------
    y_proba : array of shape (n,)
        Predicted risks in [0, 1]; clipped to [ε, 1 − ε] with ε the float64
        machine epsilon before use, so p = 0 or 1 gives finite weights.
    y_true : array of shape (n,)
        Outcomes, 0 or 1.
    r_a : float
        Alternative odds ratio R_A (positive, not 1).

    Returns
    -------
    ndarray of shape (n,). For y = 0 the weight is −ln(1 + (R_A − 1) p)
    (negative when R_A > 1); for y = 1 it is ln R_A plus that.

    Example: p = 0.2, R_A = 2 gives −ln 1.2 = −0.18232 for y = 0 and
    ln 2 − ln 1.2 = 0.51083 for y = 1 [1]_.
    """
    r_a = _check_odds_ratio(r_a)
    p = np.clip(_check_risks(y_proba), _EPS, 1.0 - _EPS)
    y = _check_outcomes(y_true, p.shape[0])
    # log1p keeps precision for small (R_A − 1) p.
    return y * math.log(r_a) - np.log1p((r_a - 1.0) * p)


def odds_shifted_risk(y_proba: ArrayLike, odds_ratio: float) -> NDArray[np.float64]:
    """Event probability when the true odds are ``odds_ratio`` times the model's.

    q = OR p / (1 − p + OR p); OR = 1 gives q = p. Used to describe the
    out-of-control stream a chart is meant to detect [1]_.
    """
    odds_ratio = float(odds_ratio)
    if not (math.isfinite(odds_ratio) and odds_ratio > 0.0):
        raise ValueError(f"odds_ratio must be finite and positive, got {odds_ratio!r}")
    p = _check_risks(y_proba)
    return odds_ratio * p / (1.0 - p + odds_ratio * p)


@dataclass(frozen=True, slots=True)
class CusumState:
    """Where one chart stands after the cases it has consumed since its last reset.

    Attributes
    ----------
    r_a : alternative odds ratio R_A of the chart.
    h : control limit; the chart signals at the first case with S > h.
    s : current value S_t (S_0 = 0 after a reset).
    n_cases : cases consumed since the last reset.
    max_s : largest S over the run, counting the starting value 0.
    argmax_case : 1-based case number (since reset) where ``max_s`` was first
        reached; 0 while no case has lifted S above its starting value.
    signal_case : 1-based case number of the first signal since reset, or
        None. Later crossings before the reset do not move it.
    """

    r_a: float
    h: float
    s: float = 0.0
    n_cases: int = 0
    max_s: float = 0.0
    argmax_case: int = 0
    signal_case: int | None = None

    def __post_init__(self) -> None:
        _check_odds_ratio(self.r_a)
        if not (math.isfinite(self.h) and self.h > 0.0):
            raise ValueError(f"h must be finite and positive, got {self.h!r}")
        if not (math.isfinite(self.s) and self.s >= 0.0):
            raise ValueError(f"s must be finite and non-negative, got {self.s!r}")
        if not (math.isfinite(self.max_s) and self.max_s >= self.s):
            raise ValueError(f"max_s must be finite and at least s, got {self.max_s!r}")
        if self.n_cases < 0 or not 0 <= self.argmax_case <= self.n_cases:
            raise ValueError("need 0 <= argmax_case <= n_cases")
        if self.signal_case is not None and not 1 <= self.signal_case <= self.n_cases:
            raise ValueError("signal_case must lie between 1 and n_cases")

    @property
    def signalled(self) -> bool:
        """True once the chart has crossed h since its last reset."""
        return self.signal_case is not None

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-able dict (floats, ints, None) for storage."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> CusumState:
        """Rebuild a state saved with ``to_dict``; unknown or missing keys raise."""
        expected = set(cls.__dataclass_fields__)
        if set(data) != expected:
            raise ValueError(f"state keys must be exactly {sorted(expected)}, got {sorted(data)}")
        signal = data["signal_case"]
        return cls(
            r_a=float(data["r_a"]),
            h=float(data["h"]),
            s=float(data["s"]),
            n_cases=int(data["n_cases"]),
            max_s=float(data["max_s"]),
            argmax_case=int(data["argmax_case"]),
            signal_case=None if signal is None else int(signal),
        )


@dataclass(frozen=True, slots=True)
class CusumStep:
    """What one ``advance`` call produced.

    ``signal_index`` is the 0-based position in the batch of the case at which
    the chart first signalled, or None if it did not signal in this batch
    (including when it had already signalled before and was not reset).
    ``path`` holds S after each case of the batch when asked for.
    """

    state: CusumState
    signal_index: int | None
    path: NDArray[np.float64] | None = None


def new_chart(h: float, r_a: float = UPPER_ODDS_RATIO) -> CusumState:
    """A fresh chart at S = 0 with limit h (for example from ``design_cusum``)."""
    return CusumState(r_a=float(r_a), h=float(h))


def reset(state: CusumState, h: float | None = None) -> CusumState:
    """Restart the chart at S = 0 after a person has resolved its alarm.

    Pass ``h`` to adopt a limit redesigned for the current risk mix
    (docs/methods.md §18: "refresh h if the risk mix has changed").
    """
    return CusumState(r_a=state.r_a, h=state.h if h is None else float(h))


def _lindley_path(s0: float, w: NDArray[np.float64]) -> NDArray[np.float64]:
    """S_t for t = 1..n from S_0 = s0 without a Python loop."""
    # Lindley recursion trick: with C_t = s0 + W_1 + ... + W_t, the reflected
    # walk is S_t = C_t − min(0, min_{s≤t} C_s): each time C reaches a new low
    # below 0 the chart sits at 0, and afterwards S is the rise since that low.
    c = s0 + np.cumsum(w)
    return c - np.minimum(np.minimum.accumulate(c), 0.0)


def advance(
    state: CusumState,
    y_proba: ArrayLike,
    y_true: ArrayLike,
    *,
    return_path: bool = False,
) -> CusumStep:
    """Feed a batch of mature cases, in order, through the chart.

    Parameters
    ----------
    state : the chart before the batch.
    y_proba, y_true : arrays of shape (n,)
        Risks (clipped to [ε, 1 − ε]) and outcomes, in processing order. An
        empty batch returns the state unchanged.
    return_path : also return S after each case of the batch.

    Returns
    -------
    CusumStep with the new state and the in-batch position of a new signal.

    Notes
    -----
    S_t = max(0, S_{t−1} + W_t) is evaluated through cumulative sums (see
    ``_lindley_path``); the result equals the case-by-case recursion up to
    rounding of order ε·Σ|W|. The signal rule is strict: S_t > h [1]_.
    """
    w = cusum_weights(y_proba, y_true, state.r_a)
    n = w.shape[0]
    if n == 0:
        return CusumStep(state, None, np.empty(0) if return_path else None)
    path = _lindley_path(state.s, w)

    best = int(np.argmax(path))  # first occurrence of the batch maximum
    max_s, argmax_case = state.max_s, state.argmax_case
    if path[best] > max_s:
        max_s, argmax_case = float(path[best]), state.n_cases + best + 1

    signal_index = None
    signal_case = state.signal_case
    if signal_case is None:
        above = np.flatnonzero(path > state.h)
        if above.size:
            signal_index = int(above[0])
            signal_case = state.n_cases + signal_index + 1

    new_state = replace(
        state,
        s=float(path[-1]),
        n_cases=state.n_cases + n,
        max_s=max_s,
        argmax_case=argmax_case,
        signal_case=signal_case,
    )
    return CusumStep(new_state, signal_index, path if return_path else None)
