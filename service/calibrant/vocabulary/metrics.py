"""The metric registry: every key a period reports, in the order the API lists them.

Rollup computes these keys, alarms judge them, the API types them and
docs/methods.md explains them; each reads this one table, so a new metric is
added here and in the statistics core, nowhere else.

``direction`` says which way is worse: ``higher`` (a larger value is worse),
``lower`` (a smaller value is worse), ``away_from_one`` / ``away_from_zero``
(the ideal is 1 or 0, either side is worse), ``none`` (descriptive only).
``interval``: the period reports a 95 % interval ``<key>_ci``.
``needs_labels``: computed from labeled cases only (else from every prediction).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

Direction = Literal["higher", "lower", "away_from_one", "away_from_zero", "none"]


@dataclass(frozen=True, slots=True)
class Metric:
    key: str
    description: str
    direction: Direction
    interval: bool = False
    needs_labels: bool = True


COUNTS: tuple[Metric, ...] = (
    Metric("n_predictions", "predictions scored in the period", "none", needs_labels=False),
    Metric("n_labeled", "predictions with an outcome (or counted 0 as implicit negatives)", "none"),
    Metric("n_immature", "predictions whose horizon and lag have not passed yet", "none",
           needs_labels=False),
)

METRICS: tuple[Metric, ...] = (
    Metric("label_coverage", "n_labeled / n_predictions", "lower", needs_labels=False),
    Metric("mean_probability", "mean predicted probability", "none", interval=True, needs_labels=False),
    Metric("observed_rate", "share of events among labeled cases", "none", interval=True),
    Metric("oe_ratio", "observed / expected events", "away_from_one", interval=True),
    Metric("log_loss", "mean negative Bernoulli log-likelihood", "higher", interval=True),
    Metric("log_loss_expected", "log-loss expected if the probabilities were calibrated", "none"),
    Metric("brier", "mean squared error of the probabilities", "higher", interval=True),
    Metric("brier_reliability", "Brier decomposition: reliability (miscalibration)", "higher"),
    Metric("brier_resolution", "Brier decomposition: resolution", "lower"),
    Metric("brier_uncertainty", "Brier decomposition: uncertainty of the outcome", "none"),
    Metric("calibration_intercept", "calibration-in-the-large: offset with slope fixed at 1",
           "away_from_zero", interval=True),
    Metric("calibration_slope", "slope of the logistic recalibration", "away_from_one", interval=True),
    Metric("spiegelhalter_z", "Spiegelhalter's z test of calibration", "away_from_zero"),
    Metric("ece", "expected calibration error over equal-width bins", "higher"),
    Metric("auc", "area under the ROC curve", "lower", interval=True),
    Metric("psi", "population stability index against the model's reference", "higher",
           needs_labels=False),
)

COUNT_KEYS: tuple[str, ...] = tuple(m.key for m in COUNTS)
METRIC_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS)
INTERVAL_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS if m.interval)
LABEL_FREE_KEYS: tuple[str, ...] = tuple(m.key for m in (*COUNTS, *METRICS) if not m.needs_labels)
BY_KEY: dict[str, Metric] = {m.key: m for m in (*COUNTS, *METRICS)}
