"""Calibration tests on arrays: observed/expected ratio, Spiegelhalter's z and
the Hosmer–Lemeshow statistic.

The logistic recalibration fits (calibration intercept and slope) live in
:mod:`calibrant.stats.recalibration`; binned and smoothed calibration errors
(ECE, MCE, ICI) in :mod:`calibrant.stats.calibration_error`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from calibrant.stats._binning import assign_bins
from calibrant.stats._numerics import Z95, norm_two_sided_p, weighted_quantile
from calibrant.stats._validation import as_labeled, check_n_bins
from calibrant.stats.result import Estimate, Status, estimate, finite_or_none, missing

__all__ = [
    "P_VALUE_MIN_EXPECTED",
    "HosmerLemeshow",
    "hosmer_lemeshow",
    "hosmer_lemeshow_from_groups",
    "observed_expected",
    "observed_expected_from_sums",
    "spiegelhalter_from_sums",
    "spiegelhalter_sums_from_power_sums",
    "spiegelhalter_z",
]


# ----------------------------------------------------------------------------- O/E
def observed_expected_from_sums(n: float, O: float, E: float, Spq: float) -> Estimate:  # noqa: E741 docs/methods.md names O, E
    """O/E with 95 % interval and the O − E z from n, O = Σy, E = Σp, Spq = Σp(1 − p)."""
    if n <= 0:
        return missing(Status.NO_VALUE, "empty window", n=0.0)
    z = (O - E) / math.sqrt(Spq) if Spq > 0 else math.nan
    extra = {"observed": O, "expected": E, "z": z,
             "p_value": norm_two_sided_p(z) if math.isfinite(z) else None}
    if not E > 0:
        return missing(Status.NO_VALUE, "no expected events (every p is 0)", n=n, extra=extra)
    oe = O / E
    ci = None
    reason = ""
    if 0 < O < n:
        half = Z95 * math.sqrt(max(1.0 / O - 1.0 / n, 0.0))
        ci = (oe * math.exp(-half), oe * math.exp(half))
    else:
        reason = ("no log-scale interval when O = 0 or O = n; use an exact Poisson-binomial "
                  "or bootstrap interval")
    return estimate(oe, ci=ci, n=n, extra=extra, reason=reason)


def observed_expected(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Observed/expected event ratio O/E = Σy / Σp, with an approximate 95 % interval.

    Interval: exp(ln(O/E) ± 1.96 sqrt(1/O − 1/n)) (E treated as fixed, O
    binomial). ``extra``: O, E, and the calibration-in-the-large test
    z = (O − E)/sqrt(Σ p(1 − p)) with its two-sided normal p-value (weight 1
    in the score-test family of docs/methods.md §3). O/E > 1: the model
    under-predicts events.

    Edge cases: empty or E = 0 → no_value; O ∈ {0, n}: value without
    interval (reason says so).

    Hand check: y = (1, 0), p = (0.2, 0.2): O/E = 2.5.

    References: Debray et al. (2017), BMJ 356:i6460 [M, from memory] for the
    variance form; docs/methods.md §8.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    return observed_expected_from_sums(
        d.n, d.n1, float(d.w @ d.p), float(d.w @ (d.p * (1.0 - d.p)))
    )


# ----------------------------------------------------------------------------- Spiegelhalter
def spiegelhalter_sums_from_power_sums(
    n1: float, S1_pos: float, S1: float, S2: float, S3: float, S4: float
) -> tuple[float, float]:
    """(numerator, null variance) of Spiegelhalter's z from power sums (summary path).

    numerator = n1 − 2 Σ_{y=1} p − Σp + 2Σp²; variance = Σ(p − 5p² + 8p³ − 4p⁴)
    = Σ (1 − 2p)² p(1 − p) [D, docs/methods.md §10].
    """
    return n1 - 2.0 * S1_pos - S1 + 2.0 * S2, S1 - 5.0 * S2 + 8.0 * S3 - 4.0 * S4


def spiegelhalter_from_sums(
    numerator: float, variance: float, *, n: float | None = None, scale: float | None = None
) -> Estimate:
    """z_S = numerator / sqrt(variance), two-sided normal p-value in ``extra``.

    ``scale`` (Σ p(1 − p), optional) guards the power-sum path: a variance below
    1e-10·scale is cancellation noise (all p ≈ ½) and gives no_value.
    """
    floor = 0.0 if scale is None else 1e-10 * scale
    if n is not None and n <= 0:
        return missing(Status.NO_VALUE, "empty window", n=0.0)
    if not variance > floor:
        return missing(Status.NO_VALUE,
                       "null variance is 0 (every p is ½, 0 or 1): the test is undefined", n=n)
    z = numerator / math.sqrt(variance)
    return estimate(z, n=n, extra={"p_value": norm_two_sided_p(z)})


def spiegelhalter_z(
    y_true: ArrayLike, y_proba: ArrayLike, *, sample_weight: ArrayLike | None = None
) -> Estimate:
    """Spiegelhalter's z test of calibration, two-sided normal p-value in ``extra``.

        z_S = Σ (y_i − p_i)(1 − 2p_i) / sqrt( Σ (1 − 2p_i)² p_i(1 − p_i) )
            = (BS − E0[BS]) / sqrt(Var0[BS]).

    Limits: rows with p = ½ carry no weight and the weight changes sign at ½,
    so a uniform shift of risks straddling ½ can cancel; use it with the O − E
    test.

    Edge cases: empty → no_value; all p ∈ {0, ½, 1} → null variance 0 → no_value.

    Published check (Rufibach 2010, Table 1): y = (1, 0), p = (0.2, 0.2) → 1.06;
    p = (0.4, 0.5) → 1.22.

    References: Spiegelhalter (1986), Statistics in Medicine 5(5):421–433;
    Rufibach (2010), J Clin Epidemiol 63(8):938–939; docs/methods.md §10.
    """
    d = as_labeled(y_true, y_proba, sample_weight)
    p, w = d.p, d.w
    a = 1.0 - 2.0 * p
    return spiegelhalter_from_sums(
        float(w @ ((d.y - p) * a)), float(w @ (a * a * p * (1.0 - p))), n=d.n
    )


# ----------------------------------------------------------------------------- Hosmer–Lemeshow
#: A p-value is given only when every group has at least this many expected events and
#: expected non-events (the rule of 5 for χ² tests, common practice). In
#: tests/bench/hosmer_lemeshow_null.py χ²_g held its level down to a smallest group of
#: 4.7 expected events; at 0.05–0.8 it rejected 5.9–11.7 % at a stated 5 %.
P_VALUE_MIN_EXPECTED = 5.0


@dataclass(frozen=True, slots=True)
class HosmerLemeshow:
    """Hosmer–Lemeshow statistic Ĉ and its p-value against χ²_g.

    ``statistic`` is for context and comparability with clinical reporting, not
    for alarms. ``p_value`` = P(χ²_g ≥ Ĉ) with ``df`` = g, the number of
    non-empty groups: the predictions come from a model fitted elsewhere, so no
    parameter is estimated on the monitored data and the g − 2 of the
    development setting does not apply (it rejected 11–17 % of calibrated
    windows at a stated 5 %; docs/methods.md §11). ``p_value`` is None, with
    ``reason`` saying so, when a group has fewer than
    :data:`P_VALUE_MIN_EXPECTED` expected events or non-events.
    """

    status: Status
    reason: str
    n: float
    statistic: float | None = None
    n_groups: int = 0
    df: int = 0
    p_value: float | None = None
    min_expected: float | None = None
    table: tuple[tuple[float, float, float], ...] = ()  # (n_j, O_j, E_j)

    @property
    def measured(self) -> bool:
        return self.status is Status.MEASURED


def hosmer_lemeshow_from_groups(
    n_j: ArrayLike, o_j: ArrayLike, e_j: ArrayLike, *, min_expected: float = 10.0
) -> HosmerLemeshow:
    """Ĉ = Σ_j (O_j − E_j)² / (n_j p̄_j(1 − p̄_j)), p̄_j = E_j/n_j, from group totals.

    p-value: P(χ²_g ≥ Ĉ), g = number of non-empty groups. Why g degrees of
    freedom [D]: the groups depend on the predictions only, so given them the
    O_j are independent with mean E_j and variance
    V_j = Σ_{i∈j} p_i(1 − p_i) = n_j p̄_j(1 − p̄_j) − Σ_{i∈j} (p_i − p̄_j)²,
    and under calibration Ĉ ≈ Σ_j λ_j χ²_1 with λ_j = V_j / (n_j p̄_j(1 − p̄_j)) ≤ 1:
    χ²_g or slightly conservative, once the group counts are large enough for
    the normal approximation (:data:`P_VALUE_MIN_EXPECTED`). Hosmer, Lemeshow &
    Sturdivant (2013), Applied Logistic Regression, 3rd ed., section on external
    validation, use g degrees of freedom when the model was not fitted to the
    data [M: cited from memory, not checked against the book].

    Empty groups drop out. ``min_expected``: floor on min_j min(E_j, n_j − E_j)
    (docs/methods.md §20: ≥ 10 expected per group), else too_few_cases; below
    :data:`P_VALUE_MIN_EXPECTED` the statistic is given without a p-value.
    """
    n_j, o_j, e_j = (np.asarray(a, dtype=np.float64) for a in (n_j, o_j, e_j))
    keep = n_j > 0
    n_j, o_j, e_j = n_j[keep], o_j[keep], e_j[keep]
    n = float(n_j.sum())
    g = int(n_j.size)
    table = tuple((float(a), float(b), float(c)) for a, b, c in zip(n_j, o_j, e_j, strict=True))
    if g < 3:
        return HosmerLemeshow(Status.TOO_FEW_CASES, "fewer than 3 non-empty groups", n,
                              n_groups=g, table=table)
    pbar = e_j / n_j
    denom = n_j * pbar * (1.0 - pbar)
    min_exp = float(np.min(np.minimum(e_j, n_j - e_j)))
    # mean risk within 1e-14 of 0 or 1 counts as 0 or 1: cumulative-weight sums round
    if np.any(pbar * (1.0 - pbar) <= 1e-14):
        return HosmerLemeshow(Status.NO_VALUE, "a group has mean risk 0 or 1", n, n_groups=g,
                              min_expected=min_exp, table=table)
    if min_exp < min_expected:
        return HosmerLemeshow(
            Status.TOO_FEW_CASES,
            f"a group has fewer than {min_expected:g} expected events or non-events",
            n, n_groups=g, min_expected=min_exp, table=table)
    with np.errstate(over="ignore"):  # a near-0 denominator overflows: caught just below
        c = float(np.sum((o_j - e_j) ** 2 / denom))
    if finite_or_none(c) is None:
        return HosmerLemeshow(Status.NO_VALUE, "not finite for this input", n, n_groups=g,
                              table=table)
    if min_exp < P_VALUE_MIN_EXPECTED:
        return HosmerLemeshow(
            Status.MEASURED,
            f"no p-value: a group has fewer than {P_VALUE_MIN_EXPECTED:g} expected events or "
            "non-events, where the χ² reference does not hold its level",
            n, statistic=c, n_groups=g, df=g, min_expected=min_exp, table=table)
    return HosmerLemeshow(
        Status.MEASURED, "", n, statistic=c, n_groups=g, df=g,
        p_value=float(stats.chi2.sf(c, g)), min_expected=min_exp, table=table)


def _equal_count_groups(
    p: np.ndarray, w: np.ndarray, y: np.ndarray, g: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Group totals of ``np.array_split`` of the sorted (weight-repeated) data into g groups.

    A row of weight w occupies positions [c − w, c) of the repeated sorted data
    (c = cumulative weight); each group takes the overlap of its position range
    with every row, so integer weights give exactly the repeated-row answer.
    """
    order = np.argsort(p, kind="mergesort")
    ps, ws, ys = p[order], w[order], y[order]
    cum = np.concatenate([[0.0], np.cumsum(ws)])
    N = cum[-1]
    if float(N).is_integer():
        q, r = divmod(int(N), g)  # array_split: the first r groups get one extra row
        sizes = np.array([q + 1] * r + [q] * (g - r), dtype=np.float64)
        bounds = np.concatenate([[0.0], np.cumsum(sizes)])
    else:
        bounds = np.linspace(0.0, N, g + 1)

    def cumulative(values: np.ndarray) -> np.ndarray:
        # Σ over positions < t of the per-position value, at every bound t
        cv = np.concatenate([[0.0], np.cumsum(ws * values)])
        i = np.clip(np.searchsorted(cum, bounds, side="right") - 1, 0, ps.size - 1)
        return cv[i] + (bounds - cum[i]) * values[i]

    ones = np.ones_like(ps)
    n_j, o_j, e_j = (np.diff(cumulative(v)) for v in (ones, ys, ps))
    return n_j, o_j, e_j


def hosmer_lemeshow(
    y_true: ArrayLike,
    y_proba: ArrayLike,
    *,
    sample_weight: ArrayLike | None = None,
    n_bins: int = 10,
    grouping: str = "equal_count",
    min_expected: float = 10.0,
) -> HosmerLemeshow:
    """Hosmer–Lemeshow goodness-of-fit statistic over g = ``n_bins`` risk groups.

        Ĉ = Σ_j (O_j − E_j)² / (n_j p̄_j (1 − p̄_j)),   E_j = Σ_{i∈j} p_i,  p̄_j = E_j/n_j.

    ``grouping="equal_count"`` (default): sort by p (stable) and split into g
    near-equal groups like ``np.array_split`` (weights split a row across
    groups where needed, so integer weights = repeated rows);
    ``grouping="quantile"``: groups between (weighted) quantiles of p,
    right-closed. Software differs here; with continuous p they agree.
    p-value: P(χ²_g ≥ Ĉ), g = non-empty groups (the model was fitted
    elsewhere; see :func:`hosmer_lemeshow_from_groups` for why g and not g − 2).

    Edge cases: fewer than 3 non-empty groups → too_few_cases; a group
    with mean risk 0 or 1 → no_value; a group below ``min_expected`` expected
    events or non-events → too_few_cases (pass 0 to compute anyway; below
    :data:`P_VALUE_MIN_EXPECTED` the statistic comes without a p-value). It
    rejects for negligible miscalibration at large n and has little power at
    small n; Van Calster et al. (2019) advise against it.

    References: Hosmer & Lemeshow (1980), Communications in Statistics –
    Theory and Methods 9(10):1043–1069; docs/methods.md §11.
    """
    g = check_n_bins(n_bins)
    if grouping not in ("equal_count", "quantile"):
        raise ValueError(f"grouping must be 'equal_count' or 'quantile', got {grouping!r}")
    d = as_labeled(y_true, y_proba, sample_weight)
    if d.n <= 0:
        return HosmerLemeshow(Status.NO_VALUE, "empty window", 0.0)
    if grouping == "equal_count":
        n_j, o_j, e_j = _equal_count_groups(d.p, d.w, d.y, g)
    else:
        qe = weighted_quantile(d.p, np.linspace(0.0, 1.0, g + 1), d.w)
        ids = assign_bins(d.p, qe, closed="right")
        n_j, o_j, e_j = (np.bincount(ids, weights=v, minlength=g)
                         for v in (d.w, d.w * d.y, d.w * d.p))
    return hosmer_lemeshow_from_groups(n_j, o_j, e_j, min_expected=min_expected)
