"""Builds tests/stats/summary_reference_values.json: statistics recomputed from per-bin sums.

The synthetic set is binned on a plain logit grid (width 0.05 or 0.5 on
[−16, 16], one underflow and one overflow bin), and each statistic is
recomputed from the per-bin sums alone: exact ones from sums, AUC with every
bin as one tied score, the recalibration fits as statsmodels GLMs on one row
per (bin, class) at the bin's mean logit with the class counts as
frequency weights. ``exact`` is the same statistic on the rows.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import statsmodels.api as sm
from scipy.special import logit
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score

from tests.reference.entries import SCRIPT, VERSIONS, formula, lib
from tests.reference.recipes import SYNTHETIC_RECIPE, synthetic

PATH = "tests/stats/summary_reference_values.json"
EPS = float(np.finfo(np.float64).eps)
SPIEGELHALTER_SOURCE = ("num = n1 - 2 sum_pos p - sum p + 2 sum p^2; "
                        "den = sum(p - 5p^2 + 8p^3 - 4p^4)")
LOG_LOSS_Z_SOURCE = "(LL - sum H/n)/(sqrt(sum p(1-p)x^2)/n)"


def _row_values() -> dict[str, Any]:
    """The per-observation ('exact') values the binned ones are compared with."""
    p, y, _ = synthetic()
    x = logit(np.clip(p, EPS, 1 - EPS))
    fam = sm.families.Binomial()
    n = y.size
    pc = np.clip(p, EPS, 1 - EPS)
    loss = -(y * np.log(pc) + (1 - y) * np.log(1 - pc))
    entropy = -(pc * np.log(pc) + (1 - pc) * np.log(1 - pc))
    return {
        "log_loss": log_loss(y, p, labels=[0, 1]),
        "brier": brier_score_loss(y, p),
        "auc": roc_auc_score(y, p),
        "slope_fit": sm.GLM(y, sm.add_constant(x), family=fam).fit().params,
        "citl": sm.GLM(y, np.ones((n, 1)), family=fam, offset=x).fit().params[0],
        "spiegelhalter_z": np.sum((y - p) * (1 - 2 * p))
        / np.sqrt(np.sum((1 - 2 * p) ** 2 * p * (1 - p))),
        "log_loss_z": (loss.mean() - entropy.mean()) / (np.sqrt(np.sum(p * (1 - p) * x * x)) / n),
    }


def from_bins(width: float, exact: dict[str, Any]) -> dict[str, Any]:
    p, y, _ = synthetic()
    pc = np.clip(p, EPS, 1 - EPS)
    x = logit(pc)
    edges = np.linspace(-16.0, 16.0, round(32 / width) + 1)
    k = np.searchsorted(edges, x, side="right")  # 0 = underflow, edges.size = overflow
    m = edges.size + 1
    pos = (y == 1).astype(float)

    def sums(v: np.ndarray, weight: np.ndarray | None = None) -> np.ndarray:
        return np.bincount(k, v if weight is None else v * weight, m)

    n, n1 = sums(np.ones_like(p)), sums(pos)
    n0 = n - n1
    total = {j: sums(p**j).sum() for j in (1, 2, 3, 4)}
    s1_pos = sums(p, pos).sum()
    loss = -(y * np.log(pc) + (1 - y) * np.log(1 - pc))
    entropy = -(pc * np.log(pc) + (1 - pc) * np.log(1 - pc))
    n_all, n_events = n.sum(), n1.sum()
    ll = sums(loss).sum() / n_all
    brier = (n_events - 2 * s1_pos + total[2]) / n_all  # Σ(p − y)² expanded in power sums
    below0 = np.cumsum(n0) - n0
    auc = np.sum(n1 * (below0 + 0.5 * n0)) / (n_events * n0.sum())
    bound = 0.5 * np.sum(n1 * n0) / (n_events * n0.sum())
    full = n > 0
    x_bin = sums(x)[full] / n[full]
    rows_y = np.r_[np.ones(full.sum()), np.zeros(full.sum())]
    rows_x, rows_w = np.r_[x_bin, x_bin], np.r_[n1[full], n0[full]]
    keep = rows_w > 0
    fam = sm.families.Binomial()
    slope_fit = sm.GLM(rows_y[keep], sm.add_constant(rows_x[keep]), family=fam,
                       freq_weights=rows_w[keep]).fit().params
    citl = sm.GLM(rows_y[keep], np.ones((keep.sum(), 1)), family=fam, offset=rows_x[keep],
                  freq_weights=rows_w[keep]).fit().params[0]
    z_num = n_events - 2 * s1_pos - total[1] + 2 * total[2]
    z_den = total[1] - 5 * total[2] + 8 * total[3] - 4 * total[4]
    z_ll = (ll - sums(entropy).sum() / n_all) / (np.sqrt(sums(p * (1 - p) * x * x).sum()) / n_all)
    return {
        "log_loss_from_sums": formula(ll, "exact from per-bin sums", exact=exact["log_loss"]),
        "brier_from_sums": formula(brier, "exact from per-bin sums", exact=exact["brier"]),
        "auc_from_histogram": formula(auc, "bins as ties", exact=exact["auc"],
                                      max_abs_error_bound=bound),
        "calibration_intercept_slope_from_histogram": lib(
            slope_fit, "statsmodels GLM Binomial, freq_weights = per-bin class counts, "
            "x = bin-mean logit", producer=False, exact=exact["slope_fit"]),
        "citl_from_histogram": lib(citl, "statsmodels GLM offset = bin-mean logit", producer=False,
                                   exact=exact["citl"]),
        "spiegelhalter_z_from_sums": formula(z_num / np.sqrt(z_den), SPIEGELHALTER_SOURCE,
                                             exact=exact["spiegelhalter_z"]),
        "log_loss_z_from_sums": formula(z_ll, LOG_LOSS_Z_SOURCE, exact=exact["log_loss_z"]),
    }


def build() -> dict[str, Any]:
    exact = _row_values()
    return {
        "_provenance": {
            "origin": (f"written by {SCRIPT} (python -m tests.reference.make_reference_values) "
                       f"from the synthetic set: {SYNTHETIC_RECIPE}"),
            "versions": dict(VERSIONS),
            "grid": ("these values use a plain logit grid of width 0.05 (or 0.5) on [-16, 16] "
                     "with two overflow bins, WITHOUT the logit(j/20) edges that Calibrant's "
                     "grid adds; x = logit(p clipped to [eps, 1-eps]), bins [e_k, e_k+1)"),
        },
        "width_0.05": from_bins(0.05, exact),
        "width_0.5": from_bins(0.5, exact),
    }
