"""Proper scores: log-loss and Brier score, their uncertainty, their value
expected under calibration, and skill against a base-rate forecaster.

Every statistic that depends only on sums has a ``*_from_sums`` function; the
array functions compute the sums (frequency-weighted) and call it, and the
mergeable summary calls it with its bucket sums, so both paths agree to
rounding.

Sums used below (w = frequency weight, ℓ = clipped log-loss of one row,
x = clipped logit, H = binary entropy):
n = Σw, n1 = Σwy, Sl = Σwℓ, Sll = Σwℓ², SH = ΣwH(p), Sv = Σw p(1 − p)x²,
Sse = Σw(p − y)², Sse2 = Σw(p − y)⁴, Spq = Σw p(1 − p).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike

from calibrant.stats._numerics import (
    Z95,
    binary_entropy,
    clipped_logit,
    log_loss_terms,
    norm_two_sided_p,
    variance_from_sums,
)
from calibrant.stats._validation import EPS, as_labeled, as_scores
from calibrant.stats.intervals import skew_corrected_interval
from calibrant.stats.result import Estimate, Status, estimate, missing

__all__ = [
    "CONFIDENT_ERROR_THRESHOLD",
    "brier_from_moments",
    "brier_score",
    "brier_skill_score",
    "brier_skill_score_from_sums",
    "expected_brier",
    "expected_brier_from_sums",
    "expected_log_loss",
    "expected_log_loss_from_sums",
    "log_loss",
    "log_loss_calibration_z",
    "log_loss_calibration_z_from_sums",
    "log_loss_from_sums",
    "log_loss_skill",
    "log_loss_skill_from_sums",
    "squared_error_sums_from_power_sums",
]

#: a "confident error": y = 1 with p < 1e-6, or y = 0 with p > 1 − 1e-6 (docs/methods.md §1.2)
CONFIDENT_ERROR_THRESHOLD = 1e-6

_EMPTY = "empty window: no rows with positive weight"


# ----------------------------------------------------------------------------- log-loss
def log_loss_from_sums(
    n: float,
    Sl: float,
    Sll: float,
    *,
    n_clipped: float = 0,
    n_confident_errors: float = 0,
    M3: float | None = None,
) -> Estimate:
    """Mean log-loss, its standard error and 95 % interval from sums.

    LL = Sl / n; SE = sqrt((Sll − Sl²/n)/(n − 1)) / sqrt(n) (ddof 1, variance
    clamped at 0). With ``M3`` = Σ(ℓ − LL)³ the interval is Hall's skewness-
    corrected one (:func:`calibrant.stats.intervals.skew_corrected_interval`),
    else LL ± 1.96 SE. Empty → no_value; n ≤ 1 gives the value without SE.
    ``extra`` records ε, the clipped / confident-error counts and the interval method.
    """
    extra: dict[str, float | int | str | None] = {
        "eps": EPS, "n_clipped": n_clipped, "n_confident_errors": n_confident_errors}
    if n <= 0:
        return missing(Status.NO_VALUE, _EMPTY, n=0.0, extra=extra)
    ll = Sl / n
    return _mean_score(ll, n, variance_from_sums(n, Sl, Sll), M3, extra)


def _mean_score(mean: float, n: float, var: float, M3: float | None,
                extra: dict[str, float | int | str | None]) -> Estimate:
    """A mean score with its SE and interval: Hall's when the third moment is known, else normal."""
    se = math.sqrt(var / n) if math.isfinite(var) else None
    ci = None
    if se is not None and M3 is not None:
        ci = skew_corrected_interval(mean, math.sqrt(var), M3 / n, n)
        extra["interval"] = "hall_skew_corrected_95"
    if ci is None and se is not None:
        ci = (mean - Z95 * se, mean + Z95 * se)
        extra["interval"] = "normal_95"
    return estimate(mean, se=se, ci=ci, n=n, extra=extra)


def log_loss(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Mean log-loss (nats) with standard error and normal 95 % interval.

    LL = (1/n) Σ ℓ_i, ℓ_i = −[y_i ln p_i + (1 − y_i) ln(1 − p_i)], p clipped to
    [ε, 1 − ε] with ε = float64 machine epsilon 2.22e-16 inside the logs only
    (what ``sklearn.metrics.log_loss`` does for float64 input; input is always
    cast to float64, so float32 input gives the float64 answer). The cap per
    row is −ln ε = 36.04 nats.
    SE = sd(ℓ_i, ddof 1)/√n; the 95 % interval is Hall's (1992) skewness-corrected
    interval for the population mean of ℓ (docs/methods.md §5.1), which keeps
    its coverage where a few events carry the mean.

    ``extra``: ``eps``; ``n_clipped`` (weight of rows with p < ε or p > 1 − ε);
    ``n_confident_errors`` (weight of rows with y = 1, p < 1e-6 or y = 0,
    p > 1 − 1e-6) — one such row adds 14 to 36 nats.

    Edge cases: empty → no_value. One class is fine (log-loss is defined).

    Hand check: y = (1, 0), p = (0, 0) → (36.04 + 0)/2 = 18.0218.

    References: Good (1952) [M, from memory]; Gneiting & Raftery (2007),
    JASA 102(477):359–378 [M]; docs/methods.md §5 and 0.1.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    y, p, w = d.y, d.p, d.w
    lt = log_loss_terms(y, p)
    clipped = (p < EPS) | (p > 1.0 - EPS)
    confident = ((y == 1.0) & (p < CONFIDENT_ERROR_THRESHOLD)) | (
        (y == 0.0) & (p > 1.0 - CONFIDENT_ERROR_THRESHOLD)
    )
    mean = float(w @ lt) / d.n if d.n > 0 else 0.0
    return log_loss_from_sums(
        d.n,
        float(w @ lt),
        float(w @ (lt * lt)),
        n_clipped=_count(w, clipped),
        n_confident_errors=_count(w, confident),
        M3=float(w @ (lt - mean) ** 3),
    )


def _count(w: np.ndarray, mask: np.ndarray) -> float | int:
    c = float(w[mask].sum())
    return int(c) if c.is_integer() else c


def expected_log_loss_from_sums(n: float, SH: float, Sv: float) -> Estimate:
    """E0[LL] = SH/n and its null SD sqrt(Sv)/n (as ``se``); see :func:`expected_log_loss`."""
    if n <= 0:
        return missing(Status.NO_VALUE, _EMPTY, n=0.0)
    return estimate(SH / n, se=math.sqrt(max(Sv, 0.0)) / n, n=n)


def expected_log_loss(
    y_true: ArrayLike | None, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Log-loss expected if the model were calibrated, and its SD under that null.

    If y_i ~ Bernoulli(p_i): E0[LL] = (1/n) Σ H(p_i), Var0[LL] = (1/n²) Σ p_i(1 − p_i) x_i²
    with x = logit(p) (clipped at ε). Needs no labels: ``y_true`` may be ``None``
    (it is validated when given, but unused). ``se`` holds SD0.

    Edge cases: empty → no_value; p ∈ {0, 1} contribute 0 to both terms.

    Reference: docs/methods.md §5 [D, derived there]; the standardised-score
    idea is Seillier-Moiseiwitsch & Dawid (1993), JASA 88(421):355–359.
    """
    if y_true is not None:
        d = as_labeled(y_true, y_proba, sample_weight)
        p, w = d.p, d.w
    else:
        s = as_scores(y_proba, sample_weight)
        p, w = s.p, s.w
    x = clipped_logit(p)
    return expected_log_loss_from_sums(
        float(w.sum()), float(w @ binary_entropy(p)), float(w @ (p * (1.0 - p) * x * x))
    )


def log_loss_calibration_z_from_sums(
    n: float,
    Sl: float,
    SH: float,
    Sv: float,
    *,
    n1: float | None = None,
    max_term: float | None = None,
) -> Estimate:
    """z_LL = (LL − E0[LL]) / SD0 = (Sl − SH)/sqrt(Sv), with its two-sided normal p-value.

    ``n1`` and ``max_term`` (max_i p_i(1 − p_i)x_i² over single observations) are optional;
    when given, ``extra['normal_approximation_ok']`` is 0 if n1 < 10, n0 < 10 or
    the largest term exceeds 10 % of Sv (docs/methods.md §3): then prefer a
    parametric bootstrap p-value.
    """
    if n <= 0:
        return missing(Status.NO_VALUE, _EMPTY, n=0.0)
    if not Sv > 0.0:
        return missing(
            Status.NO_VALUE, "null variance is 0 (every p is ½, 0 or 1): test undefined", n=n
        )
    z = (Sl - SH) / math.sqrt(Sv)
    extra: dict[str, float | int | str | None] = {
        "p_value": norm_two_sided_p(z),
        "expected_log_loss": SH / n,
        "sd0": math.sqrt(Sv) / n,
        "log_loss": Sl / n,
    }
    if n1 is not None and max_term is not None:
        extra["normal_approximation_ok"] = int(
            n1 >= 10 and n - n1 >= 10 and max_term <= 0.1 * Sv
        )
    return estimate(z, n=n, extra=extra)


def log_loss_calibration_z(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Log-loss calibration test z_LL = (LL − E0[LL]) / SD0, two-sided normal p in ``extra``.

    Equals −Σ x_i(y_i − p_i)/sqrt(Σ x_i² p_i(1 − p_i)) (score-test family with
    weight −logit(p), docs/methods.md §3). z > 0: the model loses more than a
    calibrated forecaster with the same p would (typically too extreme);
    z < 0: too timid. One-degree-of-freedom test, not omnibus.

    Edge cases: empty → no_value; all p = ½ → Var0 = 0 → no_value.
    ``extra['normal_approximation_ok']`` flags small or dominated windows.

    References: Seillier-Moiseiwitsch & Dawid (1993), JASA 88(421):355–359
    (standardised scores; this exact log-score form is [M, from memory]);
    docs/methods.md §5.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    y, p, w = d.y, d.p, d.w
    x = clipped_logit(p)
    v = p * (1.0 - p) * x * x  # one observation's null-variance term
    return log_loss_calibration_z_from_sums(
        d.n,
        float(w @ log_loss_terms(y, p)),
        float(w @ binary_entropy(p)),
        float(w @ v),
        n1=d.n1,
        max_term=float(v.max()) if v.size else 0.0,
    )


def _reference_log_loss(ybar: float, pi0: float | None) -> float:
    if pi0 is None:
        return float(binary_entropy(np.array(ybar)))
    pc = min(max(pi0, EPS), 1.0 - EPS)
    return -(ybar * math.log(pc) + (1.0 - ybar) * math.log1p(-pc))


def log_loss_skill_from_sums(
    n: float, n1: float, Sl: float, *, pi0: float | None = None
) -> Estimate:
    """Log-loss skill 1 − LL/LL_ref from n, n1, Sl; see :func:`log_loss_skill`."""
    return _skill(n, n1, Sl, pi0, "log_loss", _reference_log_loss,
                  "reference log-loss is 0 (one class in the window with π = ȳ)")


def log_loss_skill(
    y_true: ArrayLike,
    y_proba: ArrayLike,
    *,
    sample_weight: ArrayLike | None = None,
    pi0: float | None = None,
) -> Estimate:
    """Log-loss skill against a constant base-rate forecaster: 1 − LL / LL_ref.

    ``pi0=None``: LL_ref = H(ȳ) with the in-window prevalence ȳ; the skill is
    then McFadden's pseudo-R² against an intercept-only model (a diagnostic:
    the reference uses the window's own outcomes). ``pi0`` given (e.g. the
    training prevalence): LL_ref = −[ȳ ln π0 + (1 − ȳ) ln(1 − π0)], the
    operational skill. ``extra['reference']`` records which.
    1 = perfect, 0 = no better than the base rate, < 0 = worse.

    Edge cases: empty, or one class with π = ȳ (LL_ref = 0) → no_value.

    References: McFadden (1974) [M, from memory]; Good (1952) [M];
    docs/methods.md §5.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    return log_loss_skill_from_sums(d.n, d.n1, float(d.w @ log_loss_terms(d.y, d.p)), pi0=pi0)


# ----------------------------------------------------------------------------- Brier
def squared_error_sums_from_power_sums(
    n1: float, S1_pos: float, S2_pos: float, S3_pos: float, S2: float, S4: float
) -> tuple[float, float]:
    """(Σ(p − y)², Σ(p − y)⁴) from class-split power sums (for the summary path).

    y = 0 rows give p², p⁴; y = 1 rows give (1 − p)² = 1 − 2p + p² and
    (1 − p)⁴ = 1 − 4p + 6p² − 4p³ + p⁴. ``S2`` and ``S4`` are over all rows,
    ``S*_pos`` over y = 1 rows. [D]
    """
    sse = n1 - 2.0 * S1_pos + S2
    sse2 = n1 - 4.0 * S1_pos + 6.0 * S2_pos - 4.0 * S3_pos + S4
    return max(sse, 0.0), max(sse2, 0.0)


def brier_from_moments(
    n: float, Sse: float, Sse2: float, *, Spq: float | None = None, M3: float | None = None
) -> Estimate:
    """Brier score Sse/n with SE sqrt((Sse2 − Sse²/n)/(n − 1))/√n and a 95 % interval.

    With ``M3`` = Σ((p − y)² − BS)³ the interval is Hall's skewness-corrected one
    (:func:`calibrant.stats.intervals.skew_corrected_interval`), else BS ± 1.96 SE.
    ``Spq`` = Σ p(1 − p), when given, adds ``extra['expected_if_calibrated']`` = Spq/n.
    """
    extra: dict[str, float | int | str | None] = (
        {} if Spq is None else {"expected_if_calibrated": Spq / n if n > 0 else None})
    if n <= 0:
        return missing(Status.NO_VALUE, _EMPTY, n=0.0)
    bs = Sse / n
    return _mean_score(bs, n, variance_from_sums(n, Sse, Sse2), M3, extra)


def brier_score(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Brier score BS = (1/n) Σ (p_i − y_i)² with SE and normal 95 % interval.

    SE = sd((p − y)², ddof 1)/√n; 95 % interval by Hall's (1992) skewness
    correction (docs/methods.md §6.1). ``extra['expected_if_calibrated']`` = (1/n) Σ p(1 − p),
    the value expected if y_i ~ Bernoulli(p_i). Same number as
    ``sklearn.metrics.brier_score_loss`` for binary input (range [0, 1]).

    Edge cases: empty → no_value; one class is fine.

    Hand check: y = (1, 0), p = (0.2, 0.2) → (0.64 + 0.04)/2 = 0.34.

    References: Brier (1950), Monthly Weather Review 78(1):1–3 [M, from memory];
    Bradley, Schwartz & Hashino (2008), Weather and Forecasting 23(5):992–1006
    (sampling variance); docs/methods.md §6.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    se2 = (d.p - d.y) ** 2
    mean = float(d.w @ se2) / d.n if d.n > 0 else 0.0
    return brier_from_moments(
        d.n, float(d.w @ se2), float(d.w @ (se2 * se2)), Spq=float(d.w @ (d.p * (1.0 - d.p))),
        M3=float(d.w @ (se2 - mean) ** 3),
    )


def expected_brier_from_sums(n: float, Spq: float, Svar: float) -> Estimate:
    """E0[BS] = Spq/n with null SD sqrt(Svar)/n, Svar = Σ(1 − 2p)² p(1 − p)."""
    if n <= 0:
        return missing(Status.NO_VALUE, _EMPTY, n=0.0)
    return estimate(Spq / n, se=math.sqrt(max(Svar, 0.0)) / n, n=n)


def expected_brier(
    y_true: ArrayLike | None, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Brier score expected if the model were calibrated, with its null SD as ``se``.

    E0[BS] = (1/n) Σ p(1 − p); Var0[BS] = (1/n²) Σ (1 − 2p)² p(1 − p). No labels
    needed (``y_true`` may be ``None``). The standardised difference is
    Spiegelhalter's z (:func:`calibrant.stats.calibration.spiegelhalter_z`).

    References: Spiegelhalter (1986), Statistics in Medicine 5(5):421–433;
    Rufibach (2010), J Clin Epidemiol 63(8):938–939; docs/methods.md §6.
    """
    if y_true is not None:
        d = as_labeled(y_true, y_proba, sample_weight)
        p, w = d.p, d.w
    else:
        s = as_scores(y_proba, sample_weight)
        p, w = s.p, s.w
    pq = p * (1.0 - p)
    return expected_brier_from_sums(
        float(w.sum()), float(w @ pq), float(w @ ((1.0 - 2.0 * p) ** 2 * pq))
    )


def brier_skill_score_from_sums(
    n: float, n1: float, Sse: float, *, pi0: float | None = None
) -> Estimate:
    """BSS = 1 − BS/BS_ref from n, n1, Σ(p − y)²; see :func:`brier_skill_score`."""
    return _skill(n, n1, Sse, pi0, "brier", _reference_brier,
                  "reference Brier score is 0 (one class in the window)")


def _reference_brier(ybar: float, pi0: float | None) -> float:
    """BS of the constant forecast: ȳ(1 − ȳ) at π = ȳ, plus (ȳ − π0)² at a fixed π0."""
    return ybar * (1.0 - ybar) + (0.0 if pi0 is None else (ybar - pi0) ** 2)


def _skill(n: float, n1: float, total: float, pi0: float | None, name: str,
           reference_score: Callable[[float, float | None], float], zero_reason: str) -> Estimate:
    """1 − (total/n) / score_ref(ȳ, π0), with the reference and both scores in ``extra``."""
    if pi0 is not None and not 0.0 <= pi0 <= 1.0:
        raise ValueError(f"pi0 must lie in [0, 1], got {pi0!r}")
    reference = "in_window_prevalence" if pi0 is None else "fixed_pi0"
    if n <= 0:
        return missing(Status.NO_VALUE, _EMPTY, n=0.0, extra={"reference": reference})
    ybar = n1 / n
    ref = reference_score(ybar, pi0)
    extra: dict[str, float | int | str | None] = {
        "reference": reference, name: total / n, f"{name}_reference": ref, "pi0": pi0, "prevalence": ybar}
    if not ref > 0.0:
        return missing(Status.NO_VALUE, zero_reason, n=n, extra=extra)
    return estimate(1.0 - (total / n) / ref, n=n, extra=extra)


def brier_skill_score(
    y_true: ArrayLike,
    y_proba: ArrayLike,
    *,
    sample_weight: ArrayLike | None = None,
    pi0: float | None = None,
) -> Estimate:
    """Brier skill score 1 − BS / BS_ref against a constant forecaster.

    ``pi0=None``: BS_ref = ȳ(1 − ȳ) (in-window prevalence; a biased estimator,
    Bradley et al. 2008). ``pi0`` given: BS_ref = ȳ(1 − ȳ) + (ȳ − π0)², the Brier
    score of always forecasting π0. ``extra['reference']`` records which.

    Edge cases: empty or BS_ref = 0 (one class with π = ȳ) → no_value.

    References: Bradley, Schwartz & Hashino (2008), Weather and Forecasting
    23(5):992–1006; docs/methods.md §6.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    return brier_skill_score_from_sums(d.n, d.n1, float(d.w @ ((d.p - d.y) ** 2)), pi0=pi0)
