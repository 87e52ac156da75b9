"""Logistic recalibration: calibration-in-the-large intercept (slope fixed at 1),
calibration slope and the free-slope recalibration intercept, Cox's
likelihood-ratio tests. Newton–Raphson in numpy, standard errors from the
inverse Fisher information.

Each function has a ``*_from_logits`` twin taking the (clipped) logits x
directly; the mergeable summary passes bin-mean logits with class counts as
frequency weights (docs/methods.md §9, "From the bucket").
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, stats
from scipy.special import expit

from calibrant.stats._numerics import Z95, clipped_logit, norm_two_sided_p, weighted_quantile
from calibrant.stats._validation import as_labeled, as_scores
from calibrant.stats.result import Estimate, Status, estimate, missing

__all__ = [
    "MIN_EVENTS_SLOPE",
    "ROBUST_TAIL",
    "Recalibration",
    "RecalibrationTests",
    "calibration_intercept",
    "calibration_intercept_from_logits",
    "calibration_slope",
    "logistic_recalibration",
    "logistic_recalibration_from_logits",
    "recalibration_intercept",
    "recalibration_tests",
    "recalibration_tests_from_logits",
    "robust_calibration_slope",
    "robust_calibration_slope_from_logits",
]

#: hard floor of events and of non-events for the slope fit (docs/methods.md §20; ≥ 100 recommended)
MIN_EVENTS_SLOPE = 20
#: logits beyond ±16 are counted as high-leverage points (docs/methods.md §9)
EXTREME_LOGIT = 16.0
#: share of the labeled cases winsorised in each tail for the robust slope: logits are clipped to
#: the window's own 2.5th and 97.5th percentiles (docs/methods.md §9.6)
ROBUST_TAIL = 0.025


@dataclass(frozen=True, slots=True)
class _Fit:
    params: np.ndarray
    cov: np.ndarray
    loglik: float
    n_iter: int


def _loglik(eta: np.ndarray, y: np.ndarray, w: np.ndarray) -> float:
    # Σ w [y η − log(1 + e^η)], with logaddexp for overflow-free softplus
    return float(w @ (y * eta - np.logaddexp(0.0, eta)))


def _newton(
    X: np.ndarray, y: np.ndarray, w: np.ndarray, offset: np.ndarray, *, max_iter: int = 100,
    tol: float = 1e-10, max_abs_param: float = 50.0, max_se: float = 100.0,
) -> _Fit | None:
    """Maximum-likelihood logistic fit by Newton–Raphson with step halving.

    Returns ``None`` on divergence (separation): no convergence within
    ``max_iter``, a parameter beyond ``max_abs_param`` (a logit shift of 50 is
    not a calibration correction), a standard error above ``max_se`` (a flat,
    unidentified likelihood), or a singular or ill-conditioned (condition
    number > 1e12) information matrix.
    """
    beta = np.zeros(X.shape[1])
    if X.shape[1] == 2:
        beta[1] = 1.0  # start at "calibrated": intercept 0, slope 1
    eta = X @ beta + offset
    ll = _loglik(eta, y, w)
    for it in range(1, max_iter + 1):
        pi = expit(eta)
        info = X.T @ (X * (w * pi * (1.0 - pi))[:, None])
        score = X.T @ (w * (y - pi))
        try:
            if np.linalg.cond(info) > 1e12:
                return None
            step = np.linalg.solve(info, score)
        except np.linalg.LinAlgError:
            return None
        t = 1.0
        for _ in range(40):  # halve the step until the log-likelihood does not decrease
            new = beta + t * step
            eta_new = X @ new + offset
            ll_new = _loglik(eta_new, y, w)
            if ll_new >= ll - 1e-12 * (1.0 + abs(ll)):
                break
            t *= 0.5
        beta, eta, ll = new, eta_new, ll_new
        if not np.all(np.abs(beta) < max_abs_param):
            return None
        if np.max(np.abs(t * step)) < tol * (1.0 + np.max(np.abs(beta))):
            pi = expit(eta)
            info = X.T @ (X * (w * pi * (1.0 - pi))[:, None])
            if np.linalg.cond(info) > 1e12:
                return None
            cov = np.linalg.inv(info)
            if not np.all(np.sqrt(np.abs(np.diag(cov))) < max_se):
                return None
            return _Fit(beta, cov, ll, it)
    return None


def _undefined_classes(n1: float, n0: float) -> str | None:
    if n1 + n0 <= 0:
        return "empty window"
    if n1 <= 0 or n0 <= 0:
        return "one class only: the maximum-likelihood estimate does not exist"
    return None


# ----------------------------------------------------------------------------- CITL
def calibration_intercept_from_logits(
    y_true: ArrayLike, logits: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """:func:`calibration_intercept` with the model's logits x given directly."""
    d = as_labeled(y_true, np.zeros(np.shape(logits)), sample_weight)
    x = as_scores(logits, sample_weight, name="logits", check_unit_interval=False).p
    return _citl(d.y, x, d.w, d.n1, d.n0)


def _citl(y: np.ndarray, x: np.ndarray, w: np.ndarray, n1: float, n0: float) -> Estimate:
    why = _undefined_classes(n1, n0)
    if why:
        return missing(Status.NO_VALUE, why, n=n1 + n0)
    fit = _newton(np.ones((x.size, 1)), y, w, x)
    if fit is None:
        return missing(Status.TOO_FEW_CASES, "the offset fit did not converge", n=n1 + n0)
    a, se = float(fit.params[0]), math.sqrt(fit.cov[0, 0])
    ll0 = _loglik(x, y, w)
    lr = max(2.0 * (fit.loglik - ll0), 0.0)
    ci = _citl_score_interval(y, x, w, a)
    return estimate(a, se=se, ci=ci, n=n1 + n0, extra={
        "p_value_wald": norm_two_sided_p(a / se), "lr_statistic": lr,
        "p_value_lr": float(stats.chi2.sf(lr, 1)), "n_iter": fit.n_iter,
        "interval": "robust_score_95"})


def _citl_score_interval(y: np.ndarray, x: np.ndarray, w: np.ndarray, a_hat: float
                         ) -> tuple[float, float] | None:
    """Robust score interval of the calibration intercept: {a : |S(a)| ≤ 1.96}.

    S(a) = Σw(y − π_a) / sqrt(Σw(y − π_a)²), π_a = expit(a + x): the score of
    the offset model standardised by its empirical (sandwich) variance at the
    hypothesised a, so the band does not assume the slope is 1 (Boos 1992,
    The American Statistician 46(4):327–333, score tests with the robust
    variance; from memory). S falls from √n1 (a → −∞) to −√n0 (a → +∞), so
    with at least 4 of each class both ends exist; None otherwise.
    """
    def s(a: float) -> float:
        r = y - expit(a + x)
        return float(w @ r) / math.sqrt(max(float(w @ (r * r)), 1e-300))

    try:
        lo = optimize.brentq(lambda a: s(a) - Z95, a_hat - 40.0, a_hat, xtol=1e-10)
        hi = optimize.brentq(lambda a: s(a) + Z95, a_hat, a_hat + 40.0, xtol=1e-10)
    except ValueError:  # no sign change: too few of a class for a 95 % band
        return None
    return (float(lo), float(hi))


def calibration_intercept(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Calibration-in-the-large intercept â (logistic model with the logit as offset).

    Fit logit P(y = 1) = a + x_i with x_i = logit(p_i) (clipped at ε) as an
    offset (slope fixed at 1); â solves Σ y = Σ expit(x_i + a): the shift of
    all logits that makes predicted and observed events agree.
    SE = 1/sqrt(Σ π̂(1 − π̂)) (inverse Fisher information); the 95 % interval is the
    robust score interval of :func:`_citl_score_interval` (docs/methods.md §9.1).
    ``extra``: Wald p-value, likelihood-ratio statistic 2(ℓ_a − ℓ_0) and its
    χ²₁ p-value. This is *not* the intercept of the free-slope model
    (:func:`recalibration_intercept`).

    Edge cases: empty or one class → no_value (the MLE does not exist).

    References: Van Calster et al. (2016), J Clin Epidemiol 74:167–176;
    Van Calster et al. (2019), BMC Medicine 17:230; docs/methods.md §9.
    Same numbers as statsmodels ``GLM(y, 1, Binomial(), offset=x)``.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    return _citl(d.y, clipped_logit(d.p), d.w, d.n1, d.n0)


# ----------------------------------------------------------------------------- slope
@dataclass(frozen=True, slots=True)
class Recalibration:
    """Logistic recalibration logit P(y = 1) = α + β x: both coefficients and their covariance."""

    slope: Estimate
    intercept: Estimate
    cov_intercept_slope: float | None = None
    n_extreme_logits: float = 0
    slope_winsorised_16: float | None = None  # sensitivity fit with x clipped to ±16

    @property
    def status(self) -> Status:
        return self.slope.status

    @property
    def measured(self) -> bool:
        return self.slope.measured


def _separated(x: np.ndarray, y: np.ndarray) -> bool:
    # with one covariate and a free intercept the MLE is infinite iff the classes' x ranges
    # do not overlap (complete or quasi-complete separation)
    x1, x0 = x[y == 1.0], x[y == 0.0]
    return bool(x1.min() >= x0.max() or x1.max() <= x0.min())


def logistic_recalibration_from_logits(
    y_true: ArrayLike, logits: ArrayLike, *, sample_weight: ArrayLike | None = None,
    min_events: int = MIN_EVENTS_SLOPE,
) -> Recalibration:
    """:func:`logistic_recalibration` with the model's logits given directly."""
    d = as_labeled(y_true, np.zeros(np.shape(logits)), sample_weight)
    x = as_scores(logits, sample_weight, name="logits", check_unit_interval=False).p
    return _recal(d.y, x, d.w, d.n1, d.n0, min_events)


def _recal(
    y: np.ndarray, x: np.ndarray, w: np.ndarray, n1: float, n0: float, min_events: int
) -> Recalibration:
    n = n1 + n0
    why = _undefined_classes(n1, n0)
    if why:
        m = missing(Status.NO_VALUE, why, n=n)
        return Recalibration(m, m)
    if n1 < min_events or n0 < min_events:
        m = missing(Status.TOO_FEW_CASES,
                    f"need at least {min_events} events and {min_events} non-events "
                    f"(have {n1:g} and {n0:g})", n=n)
        return Recalibration(m, m)
    if _separated(x, y):
        m = missing(Status.TOO_FEW_CASES,
                    "events and non-events are separated by the score: the slope is infinite", n=n)
        return Recalibration(m, m)
    X = np.column_stack([np.ones_like(x), x])
    fit = _newton(X, y, w, np.zeros_like(x))
    if fit is None:
        m = missing(Status.TOO_FEW_CASES,
                    "the recalibration fit diverged (near-separation)", n=n)
        return Recalibration(m, m)
    extreme = np.abs(x) > EXTREME_LOGIT
    n_ext = float(w[extreme].sum())
    wins = None
    if n_ext > 0:
        xw = np.clip(x, -EXTREME_LOGIT, EXTREME_LOGIT)
        fw = _newton(np.column_stack([np.ones_like(xw), xw]), y, w, np.zeros_like(xw))
        wins = float(fw.params[1]) if fw is not None else None
    (a, b), cov = fit.params, fit.cov
    se_a, se_b = math.sqrt(cov[0, 0]), math.sqrt(cov[1, 1])
    common = {"n_iter": fit.n_iter, "n_extreme_logits": n_ext}
    slope = estimate(b, se=se_b, ci=(b - Z95 * se_b, b + Z95 * se_b), n=n, extra={
        **common, "p_value_wald_slope_eq_1": norm_two_sided_p((b - 1.0) / se_b),
        "slope_winsorised_16": wins, "intercept": float(a)})
    inter = estimate(a, se=se_a, ci=(a - Z95 * se_a, a + Z95 * se_a), n=n, extra={
        **common, "p_value_wald": norm_two_sided_p(a / se_a), "slope": float(b)})
    return Recalibration(slope, inter, float(cov[0, 1]), n_ext, wins)


def logistic_recalibration(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None,
    min_events: int = MIN_EVENTS_SLOPE,
) -> Recalibration:
    """Logistic recalibration (Cox 1958): fit logit P(y = 1) = α + β x, x = logit(p).

    β is the calibration slope (β < 1: predictions too extreme, β > 1: too
    moderate); α the log-odds correction at p = ½ with the slope free — not
    calibration-in-the-large. Newton–Raphson (start α = 0, β = 1, step halving,
    convergence 1e-10), covariance = inverse Fisher information
    I = Σ π̂(1 − π̂)[1, x; x, x²]; Wald 95 % intervals. Logits beyond ±16
    (after ε-clipping up to ±36) are high-leverage: their weight is
    ``n_extreme_logits`` and ``slope_winsorised_16`` is the sensitivity fit.

    Edge cases: empty or one class → no_value; fewer than ``min_events``
    events or non-events (docs/methods.md §20: hard floor 20) → too_few_cases;
    separated classes or a diverging fit → too_few_cases (statsmodels
    would return huge coefficients and SEs there).

    References: Cox (1958), Biometrika 45(3/4):562–565 [M, from memory];
    Van Calster et al. (2016), J Clin Epidemiol 74:167–176; docs/methods.md
    §9. Same numbers as statsmodels ``Logit(y, [1, x])``.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    return _recal(d.y, clipped_logit(d.p), d.w, d.n1, d.n0, min_events)


def calibration_slope(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None,
    min_events: int = MIN_EVENTS_SLOPE,
) -> Estimate:
    """Calibration slope β̂ of the logistic recalibration; see :func:`logistic_recalibration`.

    References: Cox (1958) [M, from memory]; Van Calster et al. (2016).
    """
    return logistic_recalibration(
        y_true, y_proba, sample_weight=sample_weight, min_events=min_events).slope


def recalibration_intercept(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None,
    min_events: int = MIN_EVENTS_SLOPE,
) -> Estimate:
    """Free-slope intercept α̂ of the logistic recalibration (not calibration-in-the-large).

    See :func:`logistic_recalibration`. References: Cox (1958) [M, from memory];
    Van Calster et al. (2016), J Clin Epidemiol 74:167–176.
    """
    return logistic_recalibration(
        y_true, y_proba, sample_weight=sample_weight, min_events=min_events).intercept


# ----------------------------------------------------------------------------- robust slope
def _robust(
    y: np.ndarray, x: np.ndarray, w: np.ndarray, n1: float, n0: float, tail: float, min_events: int
) -> Estimate:
    n = n1 + n0
    why = _undefined_classes(n1, n0)
    if why:
        return missing(Status.NO_VALUE, why, n=n)
    lo, hi = (float(q) for q in weighted_quantile(x, np.array([tail, 1.0 - tail]), w))
    clip: dict[str, float | int | str | None] = {
        "tail": tail, "clip_low": lo, "clip_high": hi, "n_winsorised": float(w[(x < lo) | (x > hi)].sum())}
    if hi <= lo:
        return missing(Status.TOO_FEW_CASES,
                       f"the central {1.0 - 2.0 * tail:.0%} of the logits is one value: "
                       "no spread to fit a slope to", n=n, extra=clip)
    slope = _recal(y, np.clip(x, lo, hi), w, n1, n0, min_events).slope
    if not slope.measured:
        return missing(slope.status, slope.reason, n=n, extra=clip)
    return replace(slope, extra={
        **clip, "p_value_wald_slope_eq_1": slope.extra["p_value_wald_slope_eq_1"],
        "intercept": slope.extra["intercept"], "n_iter": slope.extra["n_iter"]})


def _check_tail(tail: float) -> float:
    if not 0.0 < tail < 0.5:
        raise ValueError(f"tail must lie strictly between 0 and 0.5, got {tail!r}")
    return float(tail)


def robust_calibration_slope_from_logits(
    y_true: ArrayLike, logits: ArrayLike, *, sample_weight: ArrayLike | None = None,
    tail: float = ROBUST_TAIL, min_events: int = MIN_EVENTS_SLOPE,
) -> Estimate:
    """:func:`robust_calibration_slope` with the model's logits given directly (the clip is
    taken from these logits and their weights)."""
    d = as_labeled(y_true, np.zeros(np.shape(logits)), sample_weight)
    x = as_scores(logits, sample_weight, name="logits", check_unit_interval=False).p
    return _robust(d.y, x, d.w, d.n1, d.n0, _check_tail(tail), min_events)


def robust_calibration_slope(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None,
    tail: float = ROBUST_TAIL, min_events: int = MIN_EVENTS_SLOPE,
) -> Estimate:
    """Calibration slope refitted with the logits winsorised at the window's own percentiles.

    With x_i = logit(clip(p_i, ε, 1 − ε)) and [L, U] = [Q(tail), Q(1 − tail)]
    of the window's labeled x (numpy's 'linear' quantile, frequency-weighted;
    ``tail`` = 0.025 by default, so the central 95 %), fit

        logit P(y_i = 1) = α + β · min(max(x_i, L), U)

    exactly as :func:`logistic_recalibration` (same floors, Newton–Raphson,
    Fisher SE, Wald 95 % interval with the clip taken as fixed) and report β̂.
    ``extra``: ``tail``, ``clip_low`` = L, ``clip_high`` = U, ``n_winsorised``
    (weight of cases moved to L or U), the Wald p-value of β = 1, the intercept.

    Why: a case's pull on β̂ grows with its residual y − π̂ times its distance
    x − x̄ from the window's logits, so one case far outside them (p = 1e-9,
    x = −20.7, with y = 1 among predictions whose logits lie within about
    −6…0.5) pulls β̂ of a few hundred calibrated cases to about 0.3. Clipped to
    the window's own 2.5 % percentile it pulls like an ordinary tail case.
    Percentiles adapt to the model, where a fixed ±c either leaves a model
    whose logits lie within ±5 unprotected or clips a model whose legitimate
    predictions reach 10⁻⁶. At least ⌊tail·(n − 1)⌋ cases per tail
    are moved fully to the clip (4 at n = 200), so a single extreme case never
    sets it. Winsorising x biases β̂ upward a little on calibrated data (about
    +4 % at 2.5 %, measured; docs/methods.md §9.6): it is a check on the plain
    slope, not a replacement for it.

    Edge cases: those of :func:`logistic_recalibration`; L = U (the central
    share of the logits is one value) → too_few_cases.

    References: Cox (1958) [M, from memory] for the fit; the clip is Calibrant's
    choice, its effect measured in docs/methods.md §9.6. Same numbers as
    statsmodels ``Logit(y, [1, clip(x, L, U)])`` with L, U from ``numpy.quantile``.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    return _robust(d.y, clipped_logit(d.p), d.w, d.n1, d.n0, _check_tail(tail), min_events)


# ----------------------------------------------------------------------------- Cox LR tests
@dataclass(frozen=True, slots=True)
class RecalibrationTests:
    """Likelihood-ratio tests: joint α = 0, β = 1 (χ²₂); CITL (χ²₁); slope = 1 given α (χ²₁)."""

    joint: Estimate
    calibration_in_the_large: Estimate
    slope_given_intercept: Estimate

    @property
    def status(self) -> Status:
        """Status of the joint test (the CITL test can be ok when the slope fit is not)."""
        return self.joint.status


def recalibration_tests_from_logits(
    y_true: ArrayLike, logits: ArrayLike, *, sample_weight: ArrayLike | None = None,
    min_events: int = MIN_EVENTS_SLOPE,
) -> RecalibrationTests:
    """:func:`recalibration_tests` with the model's logits given directly."""
    d = as_labeled(y_true, np.zeros(np.shape(logits)), sample_weight)
    x = as_scores(logits, sample_weight, name="logits", check_unit_interval=False).p
    return _tests(d.y, x, d.w, d.n1, d.n0, min_events)


def _lr(stat: float, df: int, n: float) -> Estimate:
    stat = max(stat, 0.0)
    return estimate(stat, n=n, extra={"df": df, "p_value": float(stats.chi2.sf(stat, df))})


def _tests(
    y: np.ndarray, x: np.ndarray, w: np.ndarray, n1: float, n0: float, min_events: int
) -> RecalibrationTests:
    n = n1 + n0
    ll0 = _loglik(x, y, w)
    citl = _citl(y, x, w, n1, n0)
    if not citl.measured:
        m = missing(citl.status, citl.reason, n=n)
        return RecalibrationTests(m, m, m)
    ll_a = ll0 + float(citl.extra["lr_statistic"]) / 2.0  # type: ignore[arg-type]
    c = _lr(2.0 * (ll_a - ll0), 1, n)
    rec = _recal(y, x, w, n1, n0, min_events)
    if not rec.slope.measured:
        m = missing(rec.slope.status, rec.slope.reason, n=n)
        return RecalibrationTests(m, c, m)
    ll_ab = _loglik(rec.intercept.value + rec.slope.value * x, y, w)  # type: ignore[operator]
    return RecalibrationTests(_lr(2.0 * (ll_ab - ll0), 2, n), c, _lr(2.0 * (ll_ab - ll_a), 1, n))


def recalibration_tests(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None,
    min_events: int = MIN_EVENTS_SLOPE,
) -> RecalibrationTests:
    """Cox's likelihood-ratio tests of the recalibration model, χ² p-values in ``extra``.

    With ℓ_0 the log-likelihood of p as is, ℓ_a of the offset (CITL) fit and
    ℓ_ab of the free (α, β) fit: 2(ℓ_ab − ℓ_0) ~ χ²₂ (α = 0 and β = 1),
    2(ℓ_a − ℓ_0) ~ χ²₁ (calibration-in-the-large), 2(ℓ_ab − ℓ_a) ~ χ²₁
    (slope = 1 given a free intercept). Tests needing the slope fit inherit its
    floors (:func:`logistic_recalibration`).

    References: Cox (1958), Biometrika 45(3/4):562–565 [M, from memory];
    docs/methods.md §9.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    return _tests(d.y, clipped_logit(d.p), d.w, d.n1, d.n0, min_events)
