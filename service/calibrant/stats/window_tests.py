"""The tests a window rule makes on one closed period: excess log-loss and PSI against no shift.

Pure functions of a period's sums; the rule kinds (``alarms.kinds``) add their
data floors and effect floors and turn the result into a verdict.

Excess log-loss (docs/methods.md §5.2-5.3). For the labeled rows of a window,
ℓ_i the row log-loss, H(p_i) its expectation under calibration (the binary
entropy) and x_i = logit p_i (p clipped at float64 ε):

    ℓ_i − H(p_i) = −(y_i − p_i) x_i
    D       = (Σℓ − ΣH) / n                 excess log-loss
    Var0 D  = Σ p(1 − p) x² / n²             its variance if the model is calibrated
    Δ       = D − D_ref
    z       = Δ / sqrt(Var0 D + Var0 D_ref)  context only

Without a labeled reference D_ref = Var0 D_ref = 0: the window is compared with
perfect calibration.

Under calibration n·D is a weighted sum of independent centred Bernoullis. Its
right tail is heavy when events are rare (an event at a very negative x adds
−x), so the normal tail of z is too small at the levels the false-alarm budget
hands out (1e-4 to 1e-3): in simulation (tests/bench/window_null.py) the normal
test rejected 1.15 to 1.75 times as often as its level at 0.01 and 1.6 to 6.8
times at 1e-4, the most for rare events. The p-value is instead the
Lugannani–Rice saddlepoint approximation of P(Δ ≥ δ_obs) (Lugannani & Rice
1980, Adv. Appl. Prob. 12:475-490; Daniels 1987, Int. Stat. Rev. 55:37-48;
Butler 2007, "Saddlepoint Approximations with Applications", §1.2) from the
cumulant generating function of Δ over the labeled rows grouped by fine bin c
(count n_c, mean p_c, mean x_c; classes pooled):

    K(t)  = Σ_c n_c [ ln(1 − p_c + p_c e^{−t x_c/n}) + t p_c x_c/n ]   (+ the reference's: n → n_ref, t → −t)
    K'(ŝ) = δ_obs,   w = sign(ŝ) sqrt(2(ŝ δ_obs − K(ŝ))),   u = ŝ sqrt(K''(ŝ))
    P(Δ ≥ δ_obs) ≈ 1 − Φ(w) + φ(w) (1/u − 1/w)

Fine bins are 0.05 wide in logit, so grouping moves the tail by about 5e-4 of
itself. The reference enters through its own bins when it has them (D_ref is
then treated exactly like D, with the opposite sign), otherwise as an
independent normal term with CGF Var0 D_ref · t²/2. Sums built from the five
scalars alone (no bins) fall back to the normal tail of z, which is liberal for
rare events (above); ``ExcessLogLossTest.tail`` says which was used. The
special cases (the ends of the support, a lattice sum, the mean) are in
``excess_upper_tail``.

PSI no-shift level (docs/methods.md §17.2). Under "no shift" PSI on B frozen
bins is approximately (1/n + 1/m) χ²_{B−1} (a second-order expansion; Yurdakul
2018 studies its sampling distribution), so its 1 − α point is

    χ²_{1−α, B−1} · (1/n + 1/m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq
from scipy.special import expit
from scipy.stats import chi2, norm

from calibrant.stats.summary import F, Summary

__all__ = [
    "ExcessLogLossTest",
    "LogLossBins",
    "LogLossSums",
    "excess_log_loss_test",
    "excess_upper_tail",
    "log_loss_sums",
    "psi_no_shift_level",
]

# The two-sided 95 % normal point to six decimals, as the evidence of stored alarms has always used it.
_Z95_ROUNDED = 1.959964
# Below this |w| the Lugannani–Rice terms 1/u and 1/w cancel to rounding noise; the one-term
# Edgeworth expansion, whose value at the mean equals the Lugannani–Rice limit, is used instead.
_NEAR_MEAN = 1e-4
# Relative tolerance for "at the largest (smallest) attainable value".
_EDGE = 1e-12
# Above this exponent ln(1 − p + p e^a) is computed as a + ln p + ln(1 + (1 − p)e^{−a}/p).
_BIG_EXPONENT = 30.0


@dataclass(frozen=True, slots=True, eq=False)
class LogLossBins:
    """Labeled rows per non-empty fine bin of ``stats.summary``, classes pooled.

    ``count`` n_c (weights summed for a weighted summary), ``mean_p`` Σp/n_c and
    ``mean_x`` Σ logit(clip p)/n_c: what the exact null distribution of the
    excess log-loss needs, to the width of a fine bin.
    """

    count: np.ndarray
    mean_p: np.ndarray
    mean_x: np.ndarray


@dataclass(frozen=True, slots=True)
class LogLossSums:
    """Labeled-row sums of a window: n, events, Σℓ, ΣH(p), Σ p(1−p)x² (docs/methods.md §2),
    and optionally the per-bin rows (``LogLossBins``) that make the saddlepoint tail possible."""

    n: float
    n1: float
    sl: float
    sh: float
    sv: float
    bins: LogLossBins | None = field(default=None, compare=False, repr=False)


def log_loss_sums(summary: Summary, implicit_negatives: bool) -> LogLossSums:
    """The labeled rows of a summary as ``LogLossSums`` with their fine bins.

    With ``implicit_negatives`` unlabeled rows count as y = 0 (``Summary.labeled``).
    """
    v = summary.labeled(implicit_negatives)
    both = v.pos + v.neg
    count = both[:, F["n"]]
    keep = count > 0
    count = count[keep]
    bins = LogLossBins(count=count, mean_p=both[keep, F["s1"]] / count, mean_x=both[keep, F["sx"]] / count)
    return LogLossSums(n=v.total("all", "n"), n1=v.total("pos", "n"), sl=v.total("all", "sl"),
                       sh=v.total("all", "sh"), sv=v.total("all", "sv"), bins=bins)


@dataclass(frozen=True, slots=True)
class ExcessLogLossTest:
    """The one-sided test of Δ = D − D_ref > 0 and its context (module docstring)."""

    excess: float  # D
    reference_excess: float  # D_ref; 0 without a labeled reference
    difference: float  # Δ
    se: float  # sqrt(Var0 D + Var0 D_ref)
    z: float  # context: Δ / se
    z_critical: float  # context: z_{1−α}
    p_value: float  # one-sided, P(Δ ≥ δ_obs) under calibration, from ``tail``
    tail: str  # "saddlepoint" or "normal" (sums without bins)
    level: float
    significant: bool  # p_value ≤ level
    expected_log_loss: float  # E0[LL] = ΣH / n
    log_loss: float  # Σℓ / n
    reference_log_loss: float | None  # None without a labeled reference
    interval: tuple[float, float]  # Δ ± 1.96 SE


def excess_log_loss_test(current: LogLossSums, reference: LogLossSums | None,
                         level: float) -> ExcessLogLossTest:
    """P(Δ ≥ δ_obs) under calibration by saddlepoint when ``current`` has bins (module docstring);
    z = Δ / sqrt(Var0 D + Var0 D_ref) beside it (docs/methods.md §5.3).

    A reference with no labeled row counts as none. ``current`` needs n > 0 and
    Σ p(1−p)x² > 0 (every p at 0, ½ or 1 leaves no null variance).
    """
    if current.n <= 0 or current.sv <= 0:
        raise ValueError("the window needs labeled rows and a positive null variance")
    d = (current.sl - current.sh) / current.n
    var = current.sv / current.n**2
    d_ref = var_ref = 0.0
    ll_ref = None
    if reference is not None and reference.n > 0:
        d_ref = (reference.sl - reference.sh) / reference.n
        var_ref = reference.sv / reference.n**2
        ll_ref = reference.sl / reference.n
    else:
        reference = None
    delta = d - d_ref
    se = math.sqrt(var + var_ref)
    z = delta / se
    p_value, tail = _tail(current, reference, delta, z)
    return ExcessLogLossTest(
        excess=d, reference_excess=d_ref, difference=delta, se=se, z=z,
        z_critical=float(norm.isf(level)), p_value=p_value, tail=tail, level=level,
        significant=bool(p_value <= level),
        expected_log_loss=current.sh / current.n, log_loss=current.sl / current.n,
        reference_log_loss=ll_ref,
        interval=(delta - _Z95_ROUNDED * se, delta + _Z95_ROUNDED * se),
    )


def _tail(current: LogLossSums, reference: LogLossSums | None, delta: float, z: float) -> tuple[float, str]:
    """P(Δ ≥ δ_obs) and how it was had: saddlepoint over the bins there are (a reference without
    bins as a normal term), or the normal tail of z when the current window has none."""
    if current.bins is None:
        return float(norm.sf(z)), "normal"
    cells = [(current.bins, 1.0 / current.n)]
    normal_var = 0.0
    if reference is not None and reference.bins is not None:
        cells.append((reference.bins, -1.0 / reference.n))
    elif reference is not None:
        normal_var = reference.sv / reference.n**2
    return excess_upper_tail(cells, normal_var, delta), "saddlepoint"


@dataclass(frozen=True, slots=True)
class _Cgf:
    """K of Σ_c Σ_{rows} −(y − p_c) a_c + N(0, v) with y ~ Bernoulli(p_c), n_c rows in cell c."""

    n: np.ndarray
    p: np.ndarray
    a: np.ndarray  # the row weight x_c times the cell group's scale
    logit_p: np.ndarray
    log_p: np.ndarray
    v: float

    def at(self, t: float) -> tuple[float, float, float]:
        """K(t), K'(t), K''(t).

        ln(1 − p + p e^e) with e = −t a as log1p(p·expm1(e)), exact near t = 0,
        and as e + ln p + log1p((1 − p)e^{−e}/p) for large e (log-sum-exp, no overflow).
        The tilted probability π = p e^e / (1 − p + p e^e) = expit(logit p + e).
        """
        e = -t * self.a
        big = e > _BIG_EXPONENT
        small = np.log1p(self.p * np.expm1(np.minimum(e, _BIG_EXPONENT)))
        large = e + self.log_p + np.log1p(np.exp(-np.maximum(e, _BIG_EXPONENT)) * (1 - self.p) / self.p)
        log_mgf = np.where(big, large, small)
        pi = expit(self.logit_p + e)
        k = float(np.sum(self.n * (log_mgf + t * self.p * self.a))) + self.v * t * t / 2
        k1 = float(np.sum(self.n * self.a * (self.p - pi))) + self.v * t
        k2 = float(np.sum(self.n * self.a * self.a * pi * (1 - pi))) + self.v
        return k, k1, k2

    def third_cumulant(self) -> float:
        """κ3 = −Σ n_c a_c³ p_c(1 − p_c)(1 − 2p_c) (the normal term adds none)."""
        p = self.p
        return float(-np.sum(self.n * self.a**3 * p * (1 - p) * (1 - 2 * p)))

    def support(self) -> tuple[float, float]:
        """Smallest and largest attainable values (±∞ with a normal term): each row at its extreme outcome."""
        if self.v > 0:
            return -math.inf, math.inf
        up = np.where(self.a < 0, -(1 - self.p) * self.a, self.p * self.a)
        down = np.where(self.a < 0, self.p * self.a, -(1 - self.p) * self.a)
        return float(np.sum(self.n * down)), float(np.sum(self.n * up))

    def lattice_span(self) -> float | None:
        """h when the sum lives on a lattice of span h: no normal term and every |a_c| a whole
        multiple of the smallest (to 1e-9); None otherwise."""
        if self.v > 0 or self.a.size == 0:
            return None
        h = float(np.min(np.abs(self.a)))
        ratio = np.abs(self.a) / h
        return h if bool(np.all(np.abs(ratio - np.round(ratio)) <= 1e-9 * ratio)) else None

    def log_prob_of_max(self) -> float:
        """ln P(every row at the outcome that maximises its term)."""
        q = np.where(self.a < 0, self.p, 1 - self.p)
        return float(np.sum(self.n * np.log(q)))


def _cgf(cells: list[tuple[LogLossBins, float]], normal_var: float) -> _Cgf:
    n = np.concatenate([b.count for b, _ in cells])
    p = np.concatenate([b.mean_p for b, _ in cells])
    a = np.concatenate([b.mean_x * scale for b, scale in cells])
    # A cell with p ∈ {0, 1} or x = 0 adds the constant 0 under calibration.
    live = (n > 0) & (p > 0) & (p < 1) & (a != 0)
    n, p, a = n[live], p[live], a[live]
    log_p = np.log(p)
    return _Cgf(n=n, p=p, a=a, logit_p=log_p - np.log1p(-p), log_p=log_p, v=float(normal_var))


def excess_upper_tail(cells: list[tuple[LogLossBins, float]], normal_var: float, threshold: float) -> float:
    """P(Σ_groups scale·Σ_rows −(y − p)x + N(0, normal_var) ≥ threshold) under y ~ Bernoulli(p).

    ``cells``: (bins, scale) pairs — the current window with scale 1/n, a labeled
    reference with −1/n_ref — so the sum is Δ = D − D_ref. Lugannani–Rice
    (module docstring), with these cases handled apart:

    * a threshold at the largest attainable value gives the probability of that
      outcome, beyond it 0; at or below the smallest, 1;
    * a lattice sum (no normal term and every row weight a whole multiple of the
      smallest, span h: all rows in one fine bin, or scores p and 1 − p) takes
      Daniels' second continuity correction (Daniels 1987; Butler 2007 §1.2):
      ŝ solves K'(ŝ) = threshold − h/2, w as above at that point, and
      u = (2/h) sinh(ŝh/2) sqrt(K''(ŝ)). Uncorrected, the formula at an atom
      lands near the mid-point of the jump and rejects up to about 1.6 times as
      often as the level; the weights of real periods differ from bin to bin and
      their sum is not lattice;
    * within |w| < 1e-4 of the mean, where 1/u and 1/w cancel to rounding noise,
      the one-term Edgeworth expansion 1 − Φ(z) + φ(z) γ (z² − 1)/6, whose value at
      the mean is the Lugannani–Rice limit ½ − γ/(6√(2π)) (Daniels 1987);
    * should Lugannani–Rice leave [0, 1] (possible far in the tail of a
      near-lattice sum), Barndorff-Nielsen's r* form 1 − Φ(w + ln(u/w)/w), of the
      same order (Butler 2007 discusses both).
    """
    k = _cgf(cells, normal_var)
    _, _, k2_0 = k.at(0.0)
    if k2_0 <= 0:
        raise ValueError("the window needs a positive null variance")
    sd = math.sqrt(k2_0)
    low, high = k.support()
    edge = _EDGE * (abs(high) + abs(low) + sd)
    if threshold >= high - edge:
        return math.exp(k.log_prob_of_max()) if threshold <= high + edge else 0.0
    if threshold <= low + edge:
        return 1.0
    span = k.lattice_span()
    if span is not None:
        threshold -= span / 2
    z = threshold / sd
    if abs(z) < _NEAR_MEAN:
        return _edgeworth(z, k.third_cumulant() / sd**3)
    s_hat = _saddlepoint(k, threshold, sd)
    kk, _, k2 = k.at(s_hat)
    w = math.copysign(math.sqrt(max(2.0 * (s_hat * threshold - kk), 0.0)), s_hat)
    if abs(w) < _NEAR_MEAN:
        return _edgeworth(z, k.third_cumulant() / sd**3)
    tilt = s_hat if span is None else 2.0 * math.sinh(s_hat * span / 2) / span
    u = tilt * math.sqrt(k2)
    tail = float(norm.sf(w) + norm.pdf(w) * (1.0 / u - 1.0 / w))
    if not 0.0 <= tail <= 1.0:
        tail = float(norm.sf(w + math.log(u / w) / w))
    return tail


def _edgeworth(z: float, skewness: float) -> float:
    return float(norm.sf(z) + norm.pdf(z) * skewness * (z * z - 1.0) / 6.0)


def _saddlepoint(k: _Cgf, threshold: float, sd: float) -> float:
    """ŝ with K'(ŝ) = threshold: K' increases (K'' > 0), so a doubling bracket and Brent's method."""
    def gap(t: float) -> float:
        return k.at(t)[1] - threshold

    step = 1.0 / sd
    sign = 1.0 if threshold > 0 else -1.0
    near, far = 0.0, sign * step
    for _ in range(200):
        if gap(far) * sign >= 0:
            break
        near, far = far, 2.0 * far
    else:  # the support check keeps the threshold inside K'(±∞), so this cannot be reached
        raise ArithmeticError("no saddlepoint found inside the support")
    lo, hi = (near, far) if sign > 0 else (far, near)
    return float(brentq(gap, lo, hi, xtol=1e-300, rtol=4 * np.finfo(float).eps, maxiter=200))


def psi_no_shift_level(level: float, n_bins: int, n_reference: float, n_current: float) -> float:
    """χ²_{1−α, B−1} · (1/m + 1/n): PSI's 1 − ``level`` point when nothing shifted (docs/methods.md §17.2)."""
    return float(chi2.ppf(1.0 - level, n_bins - 1)) * (1.0 / n_reference + 1.0 / n_current)
