"""The metric registry: every key a period reports, in the order the API lists them.

Rollup computes these keys, alarms judge them, the API types them and
docs/methods.md explains them; each reads this one table, so a new metric is
added here and in the statistics core, nowhere else.

``direction`` says which way is worse: ``higher`` (a larger value is worse),
``lower`` (a smaller value is worse), ``away_from_one`` / ``away_from_zero``
(the ideal is 1 or 0, either side is worse), ``none`` (descriptive only).
``interval``: the period reports a 95 % interval ``<key>_ci``.
``needs_labels``: computed from labeled cases only (else from every prediction).
``p_value``: the period also reports ``<key>_p_value`` (two-sided, under calibration).
``null_level``: the period also reports ``<key>_null``, the value expected under
calibration / no drift at the period's counts and its 95 % point.
``floor``: the fewest events / non-events / labeled cases at which the period
reports the metric as measured (docs/methods.md §20.1). Below it the metric's
state is ``too_few_cases`` with a reason naming the floor, it has no interval,
and a metric whose floor says ``withhold_value`` has no value either.

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
class Floor:
    """The least data a metric is reported on (counts of the period's mature labeled cases)."""

    events: int = 0
    non_events: int = 0
    labeled: int = 0
    withhold_value: bool = False

    def met(self, n_events: float, n_non_events: float) -> bool:
        return (n_events >= self.events and n_non_events >= self.non_events
                and n_events + n_non_events >= self.labeled)

    def reason(self, n_events: float, n_non_events: float) -> str:
        """Names the floor and what the period has, e.g. 'needs at least 5 events and 5
        non-events; the period has 2 and 1'."""
        parts = []
        if self.events or self.non_events:
            parts.append(f"at least {self.events} events and {self.non_events} non-events")
        if self.labeled:
            parts.append(f"at least {self.labeled} labeled cases")
        have = f"the period has {_whole(n_events)} events and {_whole(n_non_events)} non-events"
        return f"below the floor: needs {' and '.join(parts)}; {have}"


def _whole(x: float) -> str:
    return str(round(x)) if float(x).is_integer() else f"{x:g}"


# The floors of issue-pinned groups (docs/methods.md §20.1). SCORE: log-loss, Brier, O/E,
# calibration-in-the-large, and the outcome statistics that accompany them; SLOPE: the
# calibration slope (docs/methods.md §20: 20 of each); RANKING: AUC.
SCORE_FLOOR = Floor(events=5, non_events=5)
SLOPE_FLOOR = Floor(events=20, non_events=20, withhold_value=True)
RANKING_FLOOR = Floor(events=10, non_events=10, withhold_value=True)
RATE_FLOOR = Floor(labeled=10)


@dataclass(frozen=True, slots=True)
class Metric:
    key: PeriodKey
    description: str
    direction: Direction
    interval: bool = False
    needs_labels: bool = True
    floor: Floor | None = None
    p_value: bool = False
    null_level: bool = False


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
        "none", interval=True, floor=RATE_FLOOR,
    ),
    Metric(
        "oe_ratio",
        "Observed events / expected events (sum of probabilities); 1 when calibrated "
        "in the large.",
        "away_from_one", interval=True, floor=SCORE_FLOOR,
    ),
    Metric(
        "log_loss",
        "Mean negative log-likelihood of the outcomes, natural log.",
        "higher", interval=True, floor=SCORE_FLOOR,
    ),
    Metric(
        "log_loss_expected",
        "Log-loss to expect if the probabilities were calibrated (mean binary entropy).",
        "none", floor=SCORE_FLOOR,
    ),
    Metric(
        "brier",
        "Mean squared difference between probability and outcome.",
        "higher", interval=True, floor=SCORE_FLOOR,
    ),
    Metric(
        "brier_reliability",
        "Reliability term of the Murphy decomposition of the Brier score (lower is "
        "better).",
        "higher", floor=SCORE_FLOOR,
    ),
    Metric(
        "brier_resolution",
        "Resolution term of the Murphy decomposition (higher is better).",
        "lower", floor=SCORE_FLOOR,
    ),
    Metric(
        "brier_uncertainty",
        "Uncertainty term of the Murphy decomposition: observed rate × (1 − observed "
        "rate).",
        "none", floor=SCORE_FLOOR,
    ),
    Metric(
        "calibration_intercept",
        "Logistic intercept with logit(p) as offset; 0 when calibrated in the large.",
        "away_from_zero", interval=True, floor=SCORE_FLOOR,
    ),
    Metric(
        "calibration_slope",
        "Slope of the logistic regression of the outcome on logit(p); 1 when "
        "calibrated.",
        "away_from_one", interval=True, floor=SLOPE_FLOOR,
    ),
    Metric(
        "calibration_slope_robust",
        "calibration_slope refitted with logit(p) clipped to the period's own 2.5th "
        "and 97.5th percentiles, so one extreme prediction cannot set it.",
        "away_from_one", interval=True, floor=SLOPE_FLOOR,
    ),
    Metric(
        "spiegelhalter_z",
        "Spiegelhalter's z statistic for calibration; near 0 when calibrated.",
        "away_from_zero", floor=SCORE_FLOOR, p_value=True,
    ),
    Metric(
        "ece",
        "Expected calibration error: bin-weighted mean |observed rate − mean "
        "probability|. Positive even for a calibrated model; compare with ece_null.",
        "higher", floor=SCORE_FLOOR, null_level=True,
    ),
    Metric(
        "auc",
        "Area under the ROC curve (discrimination).",
        "lower", interval=True, floor=RANKING_FLOOR,
    ),
    Metric(
        "psi",
        "Population stability index of the scores against the model's reference. "
        "Positive even without drift; compare with psi_null.",
        "higher", needs_labels=False, null_level=True,
    ),
)

COUNT_KEYS: tuple[CountKey, ...] = get_args(CountKey)
METRIC_KEYS: tuple[MetricKey, ...] = get_args(MetricKey)
if tuple(m.key for m in COUNTS) != COUNT_KEYS or tuple(m.key for m in METRICS) != METRIC_KEYS:
    raise RuntimeError("calibrant.vocabulary.metrics: the key Literals and the metric table disagree")
INTERVAL_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS if m.interval)
LABEL_FREE_KEYS: tuple[str, ...] = tuple(m.key for m in (*COUNTS, *METRICS) if not m.needs_labels)
P_VALUE_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS if m.p_value)
NULL_LEVEL_KEYS: tuple[str, ...] = tuple(m.key for m in METRICS if m.null_level)
BY_KEY: dict[str, Metric] = {m.key: m for m in (*COUNTS, *METRICS)}
