"""What a period's metrics must be, computed from its raw rows by outside libraries.

Each figure names its source. Tolerances follow docs/methods.md §2: sums-based
statistics are exact from the summary (compared at ~1e-12 relative); the AUC
treats fine bins as ties, so it may differ by at most the bins-as-ties bound
½ Σ_k n1k n0k / (n1 n0); slope and intercept come from per-class bin-mean logits,
O(w²) ≈ 1e-3 at w = 0.05.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy.special import expit
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score

EXACT = 1e-12
GLM_TOLERANCE = 1e-3
# How far (relative) the slope fitted from a summary may be from the row-level fit. Each class
# of a fine bin sits at its own mean logit, so Σ y·x is exact and only log(1 + e^(a+bx)) is
# approximated, to second order in the bin width (docs/methods.md §2). Measured on the synthetic
# traffic's law (expit(N(−0.8, 1.1)), truth expit(0.3 + 0.8x)), 40 seeds each: at most 1.8e-4
# at n = 500, 2.0e-4 at 2,000, 1.9e-4 at 50,000 — a bias, so it does not shrink with n. The
# bound is docs/methods.md §2's ~1e-3, five times the worst seen; ``binned_slope`` checks the method
# itself tightly.
SLOPE_TOLERANCE = GLM_TOLERANCE
MIN_EVENTS_SLOPE = 20  # docs/methods.md §9: the slope needs 20 events and 20 non-events

# The fine grid of docs/methods.md §2, rebuilt here from its definition (not imported):
# expit(−16 + 0.05 k), k = 0..640, plus j/20, j = 1..19.
FINE_EDGES = np.union1d(expit(np.linspace(-16.0, 16.0, 641)), np.arange(1, 20) / 20.0)


def fine_bin(p: np.ndarray) -> np.ndarray:
    return np.searchsorted(FINE_EDGES, p, side="right")


def auc_tie_bound(p: np.ndarray, y: np.ndarray) -> float:
    """½ Σ_k n1k n0k / (n1 n0): the most the fine-bins-as-ties AUC can be off (docs/methods.md §2)."""
    k = fine_bin(p)
    n1k = np.bincount(k[y == 1], minlength=FINE_EDGES.size + 1)
    n0k = np.bincount(k[y == 0], minlength=FINE_EDGES.size + 1)
    return 0.5 * float(n1k @ n0k) / (n1k.sum() * n0k.sum())


def close(actual: Any, expected: float, rel: float = EXACT, name: str = "") -> None:
    assert actual is not None, f"{name} is null, expected {expected!r}"
    assert math.isclose(actual, expected, rel_tol=rel, abs_tol=rel), f"{name}: {actual!r} != {expected!r}"


def assert_period_matches(period: dict, rows: pd.DataFrame, *, check_glm: bool = True) -> None:
    """Every listed key of one API period against its rows (all scored rows; no horizon set)."""
    n = len(rows)
    labeled = rows.dropna(subset=["label"])
    y = labeled.label.to_numpy().astype(int)
    p = labeled.probability.to_numpy()
    assert period["n_predictions"] == n  # pandas len
    assert period["n_labeled"] == len(labeled)  # pandas dropna
    assert period["n_immature"] == 0  # no horizon: nothing is immature
    if n == 0:
        assert_empty(period)
        return
    close(period["label_coverage"], len(labeled) / n, name="label_coverage")
    close(period["mean_probability"], float(np.mean(rows.probability)), name="mean_probability")  # numpy
    close(period["observed_rate"], float(np.mean(y)), name="observed_rate")  # numpy
    close(period["oe_ratio"], float(y.sum() / p.sum()), name="oe_ratio")  # numpy: Σy/Σp
    close(period["log_loss"], log_loss(y, p, labels=[0, 1]), name="log_loss")  # sklearn
    close(period["brier"], brier_score_loss(y, p), name="brier")  # sklearn
    # Spiegelhalter (1986) z in numpy: Σ(y − p)(1 − 2p) / sqrt(Σ(1 − 2p)² p(1 − p))
    z = np.sum((y - p) * (1 - 2 * p)) / np.sqrt(np.sum((1 - 2 * p) ** 2 * p * (1 - p)))
    close(period["spiegelhalter_z"], float(z), rel=1e-9, name="spiegelhalter_z")
    auc = roc_auc_score(y, p)  # sklearn, on the rows themselves
    bound = auc_tie_bound(p, y)
    assert abs(period["auc"] - auc) <= bound + EXACT, (period["auc"], auc, bound)
    if min(y.sum(), (1 - y).sum()) < MIN_EVENTS_SLOPE:
        # docs/methods.md §9: no slope from fewer than 20 events or non-events
        assert period["calibration_slope"] is None
        assert period["status"]["calibration_slope"]["state"] == "too_few_cases"
    elif check_glm:
        x = np.log(p / (1 - p))
        # statsmodels Logit on [1, logit p]: the calibration slope (Cox 1958)
        slope = sm.Logit(y, sm.add_constant(x)).fit(disp=0).params[1]
        close(period["calibration_slope"], float(slope), rel=SLOPE_TOLERANCE, name="calibration_slope")
        close(period["calibration_slope"], binned_slope(p, y), rel=1e-6, name="binned calibration_slope")
        # statsmodels GLM Binomial, intercept only, offset logit p: calibration-in-the-large
        citl = sm.GLM(y, np.ones_like(x), family=sm.families.Binomial(), offset=x).fit().params[0]
        close(period["calibration_intercept"], float(citl), rel=GLM_TOLERANCE, name="calibration_intercept")


def binned_slope(p: np.ndarray, y: np.ndarray) -> float:
    """statsmodels GLM Binomial with frequency weights, one row per (fine bin, class) at that
    class's mean logit in the bin: the docs/methods.md §2 recipe, applied by the test to its own
    binning of the raw rows."""
    x = np.log(p / (1 - p))
    k = fine_bin(p)
    size = FINE_EDGES.size + 1
    n1k = np.bincount(k, weights=y, minlength=size)
    n0k = np.bincount(k, weights=1 - y, minlength=size)
    with np.errstate(invalid="ignore", divide="ignore"):  # empty cells are dropped below
        x1k = np.bincount(k, weights=x * y, minlength=size) / n1k
        x0k = np.bincount(k, weights=x * (1 - y), minlength=size) / n0k
    rows_y = np.r_[np.ones(size), np.zeros(size)]
    rows_x, weight = np.r_[x1k, x0k], np.r_[n1k, n0k]
    keep = weight > 0
    fit = sm.GLM(rows_y[keep], sm.add_constant(rows_x[keep]), family=sm.families.Binomial(),
                 freq_weights=weight[keep]).fit()
    return float(fit.params[1])


def assert_empty(period: dict) -> None:
    """An empty period: counts 0, every other key null with a status entry saying why."""
    assert (period["n_predictions"], period["n_labeled"], period["n_immature"]) == (0, 0, 0)
    for key in ("label_coverage", "mean_probability", "observed_rate", "oe_ratio", "log_loss",
                "brier", "calibration_intercept", "calibration_slope", "auc", "ece", "psi"):
        assert period[key] is None, key
        assert period["status"][key]["state"] in {"no_value", "too_few_cases"}, key
        assert period["status"][key]["reason"], key
    assert period["log_loss_ci"] is None


def assert_strict_json(text: str) -> Any:
    """Parse refusing NaN/Infinity tokens, then check every number is finite."""
    def refuse(token: str) -> None:
        raise AssertionError(f"non-finite number {token} in the JSON")

    doc = json.loads(text, parse_constant=refuse)
    stack = [doc]
    while stack:
        item = stack.pop()
        if isinstance(item, dict):
            stack.extend(item.values())
        elif isinstance(item, list):
            stack.extend(item)
        elif isinstance(item, float):
            assert math.isfinite(item)
    return doc
