"""Datasets and reference values for the array-metric tests.

Values live in ``metrics_reference_values.json`` beside this file, each with
its producer (library call and version, numpy formula, or paper and table);
tests/reference/make_reference_values.py recomputes them (docs/methods.md §21). The
datasets are rebuilt here from their recipes.
"""

from __future__ import annotations

import json
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
from scipy.special import expit

REF: dict[str, Any] = json.loads(
    Path(__file__).with_name("metrics_reference_values.json").read_text()
)


def ref(dataset: str, key: str) -> Any:
    """The recorded value of ``key`` in ``dataset`` (see the JSON for its source)."""
    return REF[dataset][key]["value"]


@cache
def synthetic() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """docs/methods.md §21 synthetic set: (p, y, p_ref); draws in the recipe's order."""
    rng = np.random.default_rng(20240611)
    x = rng.normal(-1.0, 1.2, size=2000)
    u = rng.random(2000)
    y = (u < expit(0.3 + 0.7 * x)).astype(int)
    x_ref = rng.normal(-1.2, 1.0, size=2000)
    return expit(x), y, expit(x_ref)


@cache
def breast_cancer() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """docs/methods.md §21 breast-cancer split: (p_test, y_test, p_train); positive = benign."""
    from sklearn.datasets import load_breast_cancer
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import train_test_split
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, t = load_breast_cancer(return_X_y=True)
    Xtr, Xte, ytr, yte = train_test_split(X, t, test_size=0.3, random_state=0, stratify=t)
    model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=5000)).fit(Xtr, ytr)
    return model.predict_proba(Xte)[:, 1], yte.astype(int), model.predict_proba(Xtr)[:, 1]


DATASETS = {"synthetic": "synthetic", "breast_cancer": "breast_cancer_test"}


def dataset(name: str) -> tuple[np.ndarray, np.ndarray]:
    p, y, _ = synthetic() if name == "synthetic" else breast_cancer()
    return p, y
