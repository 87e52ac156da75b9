"""The data every reference value is computed from, rebuilt from its seeded recipe.

Each recipe string below is written into the JSON files beside the values, so
a reader can rebuild the data without this module.
"""

from __future__ import annotations

from functools import cache

import numpy as np
from scipy.special import expit
from scipy.stats import beta

SEED = 20240611

SYNTHETIC_RECIPE = (
    "rng=numpy.random.default_rng(20240611); x=rng.normal(-1.0,1.2,2000); p=expit(x); "
    "u=rng.random(2000); y=(u<expit(0.3+0.7*x)); x_ref=rng.normal(-1.2,1.0,2000); "
    "p_ref=expit(x_ref)"
)
BREAST_CANCER_RECIPE = (
    "load_breast_cancer; positive = target 1 (benign); train_test_split(test_size=0.3, "
    "random_state=0, stratify=target); make_pipeline(StandardScaler(), "
    "LogisticRegression(max_iter=5000)); p = predict_proba(X_test)[:,1]"
)
BETA_POINTS_RECIPE = "scipy.stats.beta.ppf((i + 0.5)/2000, 2, 8), i = 0..1999 (equal weight each)"


@cache
def synthetic() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(p, y, p_ref) of the synthetic set; the draws happen in the recipe's order."""
    rng = np.random.default_rng(SEED)
    x = rng.normal(-1.0, 1.2, size=2000)
    u = rng.random(2000)
    y = (u < expit(0.3 + 0.7 * x)).astype(np.int64)
    x_ref = rng.normal(-1.2, 1.0, size=2000)
    return expit(x), y, expit(x_ref)


@cache
def breast_cancer() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(p_test, y_test, p_train) of the breast-cancer split; positive class = benign."""
    from sklearn.datasets import load_breast_cancer
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import train_test_split
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, target = load_breast_cancer(return_X_y=True)
    X_tr, X_te, y_tr, y_te = train_test_split(
        X, target, test_size=0.3, random_state=0, stratify=target)
    model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=5000)).fit(X_tr, y_tr)
    return model.predict_proba(X_te)[:, 1], y_te.astype(np.int64), model.predict_proba(X_tr)[:, 1]


def labeled(name: str) -> tuple[np.ndarray, np.ndarray]:
    """(p, y) of ``"synthetic"`` or ``"breast_cancer_test"``."""
    p, y, _ = synthetic() if name == "synthetic" else breast_cancer()
    return p, y


@cache
def beta_2_8_points(k: int = 2000) -> np.ndarray:
    """k equal-weight Beta(2, 8) risks at the probabilities (i + ½)/k."""
    return beta.ppf((np.arange(k) + 0.5) / k, 2.0, 8.0)
