"""Builds tests/stats/metrics_reference_values.json: every array-metric reference value."""

from __future__ import annotations

from typing import Any

from tests.reference import drift_and_edges, labeled_binned, labeled_scores
from tests.reference.entries import SCRIPT, VERSIONS
from tests.reference.recipes import BREAST_CANCER_RECIPE, SYNTHETIC_RECIPE, labeled

PATH = "tests/stats/metrics_reference_values.json"


def provenance() -> dict[str, Any]:
    return {
        "origin": (f"written by {SCRIPT} (python -m tests.reference.make_reference_values); "
                   "every value is recomputed from the recipes below"),
        "versions": dict(VERSIONS),
        "kinds": ("'reference library' = output of the named sklearn/scipy/statsmodels call; "
                  "'formula, not reference library' = plain numpy of the published formula "
                  "(docs/methods.md gives each formula and its source); "
                  "'published' = value printed in a paper, copied from it and never recomputed"),
        "recipes": {
            "synthetic": SYNTHETIC_RECIPE,
            "breast_cancer": BREAST_CANCER_RECIPE,
            "clipping": ("log-loss terms clip p to [eps, 1-eps], eps = float64 machine epsilon "
                         "2.220446e-16 (what sklearn.metrics.log_loss does for float64 input)"),
            "psi_null_simulation": drift_and_edges.PSI_NULL_RECIPE,
            "script": SCRIPT,
        },
    }


def labeled_dataset(name: str) -> dict[str, Any]:
    p, y = labeled(name)
    return (labeled_scores.scores(p, y) | labeled_scores.calibration_tests(p, y)
            | labeled_scores.recalibration(p, y) | labeled_scores.hosmer_lemeshow(p, y)
            | labeled_binned.calibration_errors(p, y) | labeled_binned.smoothed_calibration(p, y)
            | labeled_binned.discrimination(p, y))


def build() -> dict[str, Any]:
    return {
        "_provenance": provenance(),
        "synthetic": labeled_dataset("synthetic"),
        "breast_cancer_test": labeled_dataset("breast_cancer_test"),
        "synthetic_drift_vs_reference": drift_and_edges.synthetic_drift(),
        "breast_cancer_drift_train_vs_test_scores": drift_and_edges.breast_cancer_drift(),
        "edge_cases": drift_and_edges.edge_cases(),
        "published": drift_and_edges.published(),
    }
