"""The metric registry: every key a period reports, in the order the API lists them.

Rollup computes these keys, alarms judge them, the API types them and
docs/methods.md explains them; each reads this one table, so a new metric is
added here and in the statistics core, nowhere else.

``direction`` says which way is worse: ``higher`` (a larger value is worse),
``lower`` (a smaller value is worse), ``away_from_one`` / ``away_from_zero``
(the ideal is 1 or 0, either side is worse), ``none`` (descriptive only).
``interval``: the period reports a 95 % interval ``<key>_ci``.
``needs_labels``: computed from labeled cases only (else from every prediction).

The keys are also spelled as ``Literal`` types (``CountKey``, ``MetricKey``,
``PeriodKey``) so the type checker and the API schema know them; the key tuples
are read from those types, and importing this module fails if the table and
the types ever list different keys or a different order.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal, get_args

CountKey = Literal["n_predictions", "n_labeled", "n_immature", "n_clipped", "n_confident_errors"]
MetricKey = Literal[
    "label_coverage",
    "mean_probability",
    "observed_rate",
    "oe_ratio",
    "log_loss",
    "log_loss_expected",
    "brier",
    "brier_reliability",
    "brier_resolution",
    "brier_uncertainty",
    "calibration_intercept",
    "calibration_slope",
    "calibration_slope_robust",
    "spiegelhalter_z",
    "ece",
    "auc",
    "psi",
]
PeriodKey = Literal[CountKey, MetricKey]  # every key a period reports

Direction = Literal["higher", "lower", "away_from_one", "away_from_zero", "none"]


@dataclass(frozen=True, slots=True)
class Metric:
    key: PeriodKey
    description: str
    direction: Direction
    interval: bool = False
    needs_labels: bool = True


COUNTS: tuple[Metric, ...] = (
    Metric(
        "n_predictions",
        "Predictions scored in the period (or its trailing window).",
        "none", needs_labels=False,
    ),
    Metric(
        "n_labeled",
        "Predictions of the period that have an outcome.",
        "none",
    ),
    Metric(
        "n_immature",
        "Predictions whose outcome horizon + lag has not yet passed; label metrics "
        "leave them out.",
        "none", needs_labels=False,
    ),
    Metric(
        "n_clipped",
        "Cases of the label metrics whose probability was clipped to [ε, 1 − ε], ε = "
        "2.2e-16.",
        "none",
    ),
    Metric(
        "n_confident_errors",
        "Cases of the label metrics with the event at p < 1e-6, or without it at p > 1 "
        "− 1e-6.",
        "higher",
    ),
)

METRICS: tuple[Metric, ...] = (
    Metric(
        "label_coverage",
        "n_labeled / n_predictions.",
        "lower", needs_labels=False,
    ),
    Metric(
        "mean_probability",
        "Mean predicted probability over every prediction.",
        "none", interval=True, needs_labels=False,
    ),
    Metric(
        "observed_rate",
        "Share of mature labeled predictions that had the event.",
        "none", interval=True,
    ),
    Metric(
        "oe_ratio",
        "Observed events / expected events (sum of probabilities); 1 when calibrated "
        "in the large.",
        "away_from_one", interval=True,
    ),
    Metric(
        "log_loss",
        "Mean negative log-likelihood of the outcomes, natural log.",
        "higher", interval=True,
    ),
    Metric(
        "log_loss_expected",
        "Log-loss to expect if the probabilities were calibrated (mean binary entropy).",
        "none",
    ),
    Metric(
        "brier",
        "Mean squared difference between probability and outcome.",
        "higher", interval=True,
    ),
    Metric(
        "brier_reliability",
        "Reliability term of the Murphy decomposition of the Brier score (lower is "
        "better).",
        "higher",
    ),
    Metric(
        "brier_resolution",
        "Resolution term of the Murphy decomposition (higher is better).",
        "lower",
    ),
    Metric(
        "brier_uncertainty",
        "Uncertainty term of the Murphy decomposition: observed rate × (1 − observed "
        "rate).",
        "none",
    ),
    Metric(
        "calibration_intercept",
        "Logistic intercept with logit(p) as offset; 0 when calibrated in the large.",
        "away_from_zero", interval=True,
    ),
    Metric(
        "calibration_slope",
        "Slope of the logistic regression of the outcome on logit(p); 1 when "
        "calibrated.",
        "away_from_one", interval=True,
    ),
    Metric(
        "calibration_slope_robust",
        "calibration_slope refitted with logit(p) clipped to the period's own 2.5th "
        "and 97.5th percentiles, so one extreme prediction cannot set it.",
        "away_from_one", interval=True,
    ),
    Metric(
        "spiegelhalter_z",
        "Spiegelhalter's z statistic for calibration; near 0 when calibrated.",
        "away_from_zero",
    ),
    Metric(
        "ece",
        "Expected calibration error: bin-weighted mean |observed rate − mean "
        "probability|.",
        "higher",
    ),
    Metric(
        "auc",
        "Area under the ROC curve (discrimination).",
        "lower", interval=True,
    ),
    Metric(
        "psi",
        "Population stability index of the scores against the model's reference.",
        "higher", needs_labels=False,
    ),
)

COUNT_KEYS: tuple[CountKey, ...] = get_args(CountKey)
METRIC_KEYS: tuple[MetricKey, ...] = get_args(MetricKey)
if tuple(m.key for m in COUNTS) != COUNT_KEYS or tuple(m.key for m in METRICS) != METRIC_KEYS:
    raise RuntimeError("calibrant.vocabulary.metrics: the key Literals and the metric table disagree")
INTERVAL_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS if m.interval)
LABEL_FREE_KEYS: tuple[str, ...] = tuple(m.key for m in (*COUNTS, *METRICS) if not m.needs_labels)
BY_KEY: dict[str, Metric] = {m.key: m for m in (*COUNTS, *METRICS)}
