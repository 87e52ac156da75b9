"""Statistics computed exactly from a :class:`~calibrant.stats.summary.Summary`.

Every function here calls the same ``*_from_sums`` kernel as the array
version in :mod:`calibrant.stats.scoring` / :mod:`calibrant.stats.calibration`,
so the summary and the array path agree to float64 rounding (docs/methods.md §2:
n, O, E, O/E, log-loss and its SE, E0, SD0, z_LL, Brier and its SE,
Spiegelhalter's z are exact from the bucket).

Label metrics take a :class:`~calibrant.stats.summary.LabeledBins` view, or a
summary plus ``implicit_negatives`` (whether unlabeled rows count as y = 0 or
are left out; docs/methods.md §19). Binned statistics live in
:mod:`calibrant.stats.summary_binned`, score drift in
:mod:`calibrant.stats.summary_drift`; :func:`all_metrics` gathers everything
the metrics API reports.
"""

from __future__ import annotations

import math
from collections.abc import Collection

import numpy as np

from calibrant.stats import summary_binned as binned
from calibrant.stats._numerics import Z95
from calibrant.stats.calibration import (
    observed_expected_from_sums,
    spiegelhalter_from_sums,
    spiegelhalter_sums_from_power_sums,
)
from calibrant.stats.recalibration import robust_calibration_slope_from_logits
from calibrant.stats.reliability import wilson_interval
from calibrant.stats.result import Estimate, Status, estimate, missing
from calibrant.stats.scoring import (
    brier_from_moments,
    brier_skill_score_from_sums,
    expected_brier_from_sums,
    expected_log_loss_from_sums,
    log_loss_calibration_z_from_sums,
    log_loss_from_sums,
    log_loss_skill_from_sums,
    squared_error_sums_from_power_sums,
)
from calibrant.stats.summary import F, LabeledBins, Summary, view
from calibrant.stats.summary_drift import psi

#: fewest events and non-events for the AUC interval of a period (docs/methods.md §15.2)
AUC_INTERVAL_MIN_PER_CLASS = 10

__all__ = [
    "all_metrics",
    "brier",
    "brier_skill_score",
    "calibration_slope_robust",
    "expected_brier",
    "expected_log_loss",
    "label_coverage",
    "log_loss",
    "log_loss_calibration_z",
    "log_loss_skill",
    "mean_probability",
    "n_clipped",
    "n_confident_errors",
    "n_labeled",
    "n_predictions",
    "observed_expected",
    "observed_rate",
    "spiegelhalter_z",
]


class _Totals:
    """Class totals of every field of a two-class view (pos, neg, all)."""

    def __init__(self, v: LabeledBins) -> None:
        self.pos = v.pos.sum(axis=0)
        self.neg = v.neg.sum(axis=0)
        self.all = self.pos + self.neg

    def __getitem__(self, key: tuple[str, str]) -> float:
        cls, field = key
        return float(getattr(self, cls)[F[field]])

    @property
    def n(self) -> float:
        return self["all", "n"]

    @property
    def n1(self) -> float:
        return self["pos", "n"]


def _score_totals(data: Summary | LabeledBins) -> _Totals:
    """Totals over every prediction of a summary, or over the labeled rows of a view."""
    if isinstance(data, LabeledBins):
        return _Totals(data)
    bins, fields = data.all_rows()
    return _Totals(LabeledBins(bins=bins, pos=fields * 0.0, neg=fields))


# ----------------------------------------------------------------------------- counts
def n_predictions(summary: Summary) -> Estimate:
    """Number (Σ weight) of predictions, labeled or not."""
    n = sum(summary.counts().values())
    return estimate(float(n), n=float(n))


def n_labeled(summary: Summary) -> Estimate:
    """Number of predictions with an outcome (positive or negative label)."""
    c = summary.counts()
    n = c["positive"] + c["negative"]
    return estimate(n, n=n, extra={"n_events": c["positive"], "n_non_events": c["negative"]})


def label_coverage(summary: Summary) -> Estimate:
    """Share of predictions that have an outcome: n_labeled / n_predictions (no interval:
    it describes the window, it is not an estimate)."""
    c = summary.counts()
    total = sum(c.values())
    if total <= 0:
        return missing(Status.NO_VALUE, "no predictions in the window", n=0.0)
    return estimate((c["positive"] + c["negative"]) / total, n=total)


def mean_probability(data: Summary | LabeledBins) -> Estimate:
    """Mean predicted probability S1/n with SE sd(p)/√n (ddof 1) and normal 95 % interval.

    A summary gives every prediction (no labels needed); a view gives its labeled rows.
    """
    t = _score_totals(data)
    n = t.n
    if n <= 0:
        return missing(Status.NO_VALUE, "empty window", n=0.0)
    mean = t["all", "s1"] / n
    if n <= 1:
        return estimate(mean, n=n)
    var = max(t["all", "s2"] - t["all", "s1"] ** 2 / n, 0.0) / (n - 1.0)
    se = math.sqrt(var / n)
    return estimate(mean, se=se, ci=(mean - Z95 * se, mean + Z95 * se), n=n)


def observed_rate(data: Summary | LabeledBins, *, implicit_negatives: bool = False) -> Estimate:
    """Event rate n1/n with a Wilson 95 % interval (Wilson 1927, JASA 22(158):209–212)."""
    t = _Totals(view(data, implicit_negatives))
    if t.n <= 0:
        return missing(Status.NO_VALUE, "no labeled predictions", n=0.0)
    return estimate(t.n1 / t.n, ci=wilson_interval(t.n1, t.n), n=t.n,
                    extra={"n_events": t.n1, "interval": "wilson_95"})


def observed_expected(data: Summary | LabeledBins, *, implicit_negatives: bool = False
                      ) -> Estimate:
    """O/E = Σy/Σp with exp(ln(O/E) ± 1.96 sqrt(1/O − 1/n)) and the O − E z (docs/methods.md §9)."""
    t = _Totals(view(data, implicit_negatives))
    return observed_expected_from_sums(t.n, t.n1, t["all", "s1"], t["all", "s1"] - t["all", "s2"])


def n_clipped(data: Summary | LabeledBins, *, implicit_negatives: bool = False) -> Estimate:
    """Labeled cases whose p was clipped to [ε, 1 − ε] (p < ε or p > 1 − ε; docs/methods.md §1.2).

    Counted over the rows the label metrics use: with ``implicit_negatives``
    unlabeled rows count too, as negatives. Exact (a summary field).
    """
    t = _Totals(view(data, implicit_negatives))
    return estimate(t["all", "n_clip"], n=t.n)


def n_confident_errors(data: Summary | LabeledBins, *, implicit_negatives: bool = False
                       ) -> Estimate:
    """Labeled cases with y = 1 and p < 10⁻⁶, or y = 0 and p > 1 − 10⁻⁶ (docs/methods.md §1.2).

    Same rows as :func:`n_clipped`; an implicit negative counts as y = 0. Exact.
    """
    t = _Totals(view(data, implicit_negatives))
    return estimate(t["all", "n_conf"], n=t.n)


# ----------------------------------------------------------------------------- log-loss
def log_loss(data: Summary | LabeledBins, *, implicit_negatives: bool = False) -> Estimate:
    """Mean clipped log-loss Sl/n, SE sqrt((Sll − Sl²/n)/(n − 1)/n), Hall's 95 % interval.

    The interval's third moment comes from the cells (:func:`_third_central_from_cells`).

    Exact from the bucket (docs/methods.md §5 and 0.2); ``extra`` carries ε and the
    clipped / confident-error counts stored in the summary.
    """
    v = view(data, implicit_negatives)
    t = _Totals(v)
    m3 = None
    if t.n > 0:
        cells = np.concatenate([v.pos, v.neg])
        m3 = _third_central_from_cells(cells[:, F["n"]], cells[:, F["sl"]], cells[:, F["sll"]],
                                       t["all", "sl"] / t.n)
    return log_loss_from_sums(t.n, t["all", "sl"], t["all", "sll"],
                              n_clipped=_count(t["all", "n_clip"]),
                              n_confident_errors=_count(t["all", "n_conf"]), M3=m3)


def _third_central_from_cells(n: np.ndarray, total: np.ndarray, squares: np.ndarray,
                              mean: float) -> float:
    """Σ(s − mean)³ over every case from per-cell (count, Σs, Σs²), s a per-case score.

    Exact per cell up to its within-cell third central moment, which is left
    out: Σ_c [n_c (m_c − mean)³ + 3 (m_c − mean) Σ_c (s − m_c)²], m_c the cell
    mean. A cell (fine bin 0.05 wide in logit, one class) holds nearly equal
    scores, so the omitted term is of third order in that width.
    """
    keep = n > 0
    n, total, squares = n[keep], total[keep], squares[keep]
    m = total / n
    within = np.maximum(squares - total * m, 0.0)
    d = m - mean
    return float(np.sum(n * d**3 + 3.0 * d * within))


def _count(x: float) -> float | int:
    return int(x) if float(x).is_integer() else x


def expected_log_loss(data: Summary | LabeledBins) -> Estimate:
    """E0[LL] = ΣH(p)/n with null SD sqrt(Σp(1−p)x²)/n as ``se`` (docs/methods.md §5, [D]).

    Needs no labels: a summary gives every prediction, a view its labeled rows.
    """
    t = _score_totals(data)
    return expected_log_loss_from_sums(t.n, t["all", "sh"], t["all", "sv"])


def log_loss_calibration_z(data: Summary | LabeledBins, *, implicit_negatives: bool = False
                           ) -> Estimate:
    """z_LL = (Sl − SH)/sqrt(Sv) with two-sided normal p (docs/methods.md §5 and 0.3).

    The summary does not keep the largest single term, so the
    ``normal_approximation_ok`` flag of the array version is not reported.
    """
    t = _Totals(view(data, implicit_negatives))
    return log_loss_calibration_z_from_sums(t.n, t["all", "sl"], t["all", "sh"], t["all", "sv"])


def log_loss_skill(data: Summary | LabeledBins, *, implicit_negatives: bool = False,
                   pi0: float | None = None) -> Estimate:
    """1 − LL/LL_ref against the in-window prevalence (``pi0=None``) or a fixed π0."""
    t = _Totals(view(data, implicit_negatives))
    return log_loss_skill_from_sums(t.n, t.n1, t["all", "sl"], pi0=pi0)


# ----------------------------------------------------------------------------- Brier
def _squared_error_sums(t: _Totals) -> tuple[float, float]:
    return squared_error_sums_from_power_sums(
        t.n1, t["pos", "s1"], t["pos", "s2"], t["pos", "s3"], t["all", "s2"], t["all", "s4"])


def brier(data: Summary | LabeledBins, *, implicit_negatives: bool = False) -> Estimate:
    """Brier score Σ(p − y)²/n with SE from Σ(p − y)⁴ (both from S1..S4 per class; exact);
    Hall's 95 % interval with the third moment from the cells (:func:`_third_central_from_cells`)."""
    v = view(data, implicit_negatives)
    t = _Totals(v)
    sse, sse2 = _squared_error_sums(t)
    m3 = None
    if t.n > 0:
        pos, neg = v.pos, v.neg
        n1, s1, s2, s3, s4 = (pos[:, F[f]] for f in ("n", "s1", "s2", "s3", "s4"))
        # an event scores (1 − p)², a non-event p² (expanded in the stored power sums)
        m3 = _third_central_from_cells(
            np.concatenate([n1, neg[:, F["n"]]]),
            np.concatenate([n1 - 2.0 * s1 + s2, neg[:, F["s2"]]]),
            np.concatenate([n1 - 4.0 * s1 + 6.0 * s2 - 4.0 * s3 + s4, neg[:, F["s4"]]]),
            sse / t.n)
    return brier_from_moments(t.n, sse, sse2, Spq=t["all", "s1"] - t["all", "s2"], M3=m3)


def expected_brier(data: Summary | LabeledBins) -> Estimate:
    """E0[BS] = Σp(1 − p)/n with null SD sqrt(Σ(1 − 2p)²p(1 − p))/n as ``se`` (no labels)."""
    t = _score_totals(data)
    s1, s2, s3, s4 = (t["all", f] for f in ("s1", "s2", "s3", "s4"))
    return expected_brier_from_sums(t.n, s1 - s2, s1 - 5.0 * s2 + 8.0 * s3 - 4.0 * s4)


def brier_skill_score(data: Summary | LabeledBins, *, implicit_negatives: bool = False,
                      pi0: float | None = None) -> Estimate:
    """BSS = 1 − BS/BS_ref (in-window prevalence or fixed π0; Bradley et al. 2008)."""
    t = _Totals(view(data, implicit_negatives))
    return brier_skill_score_from_sums(t.n, t.n1, _squared_error_sums(t)[0], pi0=pi0)


def spiegelhalter_z(data: Summary | LabeledBins, *, implicit_negatives: bool = False
                    ) -> Estimate:
    """Spiegelhalter's z from power sums: numerator n1 − 2Σ_{y=1}p − Σp + 2Σp²,
    variance Σ(p − 5p² + 8p³ − 4p⁴) (docs/methods.md §10; Spiegelhalter 1986).

    Precision: the power-sum variance carries an absolute rounding error of
    about ε·Σp, negligible unless nearly every p lies within ~1e-6 of 0 or 1
    (then the variance itself is tiny and z loses relative precision).
    """
    t = _Totals(view(data, implicit_negatives))
    num, var = spiegelhalter_sums_from_power_sums(
        t.n1, t["pos", "s1"], t["all", "s1"], t["all", "s2"], t["all", "s3"], t["all", "s4"])
    return spiegelhalter_from_sums(num, var, n=t.n, scale=t["all", "s1"] - t["all", "s2"])


# ----------------------------------------------------------------------------- robust slope
def calibration_slope_robust(data: Summary | LabeledBins, *, implicit_negatives: bool = False
                             ) -> Estimate:
    """Calibration slope with the logits winsorised at the window's 2.5th and 97.5th percentiles.

    :func:`calibrant.stats.recalibration.robust_calibration_slope` on the rows
    the plain summary slope is fitted to: one row per (fine bin, class) at that
    class's mean logit, its count as frequency weight. The percentiles are those
    of these rows, i.e. of the window with each case moved to its class's mean
    logit in its fine bin (within one bin, 0.05 on the logit scale, of the
    percentiles of the cases themselves). docs/methods.md §9.6.
    """
    v = view(data, implicit_negatives)
    # summary_binned's per-(bin, class) rows: the plain slope's own design, so the two differ only by the clip
    y, x, w = binned._bin_rows(v)
    res = robust_calibration_slope_from_logits(y, x, sample_weight=w)
    if res.measured:
        res.extra["approximation"] = "per-class bin-mean logits (docs/methods.md §9.4, from the summary)"
    return res


# ----------------------------------------------------------------------------- everything
def all_metrics(
    summary: Summary,
    reference: Summary | None = None,
    *,
    implicit_negatives: bool = False,
    n_bins: int = 10,
    keys: Collection[str] | None = None,
) -> dict[str, Estimate]:
    """Every window metric the API reports, keyed by its API name (only ``keys``, when given:
    the costlier fits — Brier decomposition, robust slope, Spiegelhalter's z, ECE, AUC — are
    skipped when not asked for; the cheap ones are always there).

    Label metrics use positives and negatives, plus unlabeled rows as y = 0 when
    ``implicit_negatives``. ``n_immature`` is not here: maturity is the caller's
    (the summary does not know the clock). ``brier_*`` components use
    ``n_bins`` equal-width bins (exact); ``ece`` the same bins; ``psi`` needs
    ``reference`` (else undefined).
    """
    def wanted(*names: str) -> bool:
        return keys is None or any(name in keys for name in names)

    v = summary.labeled(implicit_negatives)
    recal = binned.logistic_recalibration(v)
    out: dict[str, Estimate] = {
        "n_predictions": n_predictions(summary),
        "n_labeled": n_labeled(summary),
        "label_coverage": label_coverage(summary),
        "mean_probability": mean_probability(summary),
        "observed_rate": observed_rate(v),
        "oe_ratio": observed_expected(v),
        "log_loss": log_loss(v),
        "log_loss_expected": expected_log_loss(v),
        "brier": brier(v),
    }
    if wanted("brier_reliability", "brier_resolution", "brier_uncertainty"):
        decomposition = binned.murphy_decomposition(v, n_bins=n_bins)
        for key, attr in (("brier_reliability", "reliability"), ("brier_resolution", "resolution"),
                          ("brier_uncertainty", "uncertainty")):
            value = getattr(decomposition, attr)
            out[key] = (estimate(value, n=decomposition.n, extra={"n_bins": n_bins})
                        if decomposition.measured else missing(decomposition.status, decomposition.reason,
                                                         n=decomposition.n))
    out["calibration_intercept"] = binned.calibration_intercept(v)
    out["calibration_slope"] = recal.slope
    if wanted("calibration_slope_robust"):
        out["calibration_slope_robust"] = calibration_slope_robust(v)
    out["n_clipped"] = n_clipped(v)
    out["n_confident_errors"] = n_confident_errors(v)
    if wanted("spiegelhalter_z"):
        out["spiegelhalter_z"] = spiegelhalter_z(v)
    if wanted("ece"):
        out["ece"] = binned.ece(v, n_bins=n_bins)
    if wanted("auc"):
        # the interval from the registry's AUC floor on (10 of each), with the t quantile that keeps
        # DeLong's logit interval at its coverage there (tests/bench/coverage.py)
        out["auc"] = binned.auc(v, min_per_class=AUC_INTERVAL_MIN_PER_CLASS, small_sample_t=True)
    out["psi"] = (psi(summary, reference) if reference is not None
                  else missing(Status.NO_VALUE, "no reference summary given"))
    return out
