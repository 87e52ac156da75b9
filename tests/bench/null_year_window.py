"""A simulated stream's closed period as the window kinds read it (``alarms.kinds.base.WindowInputs``).

The service builds the same three answers from stored hourly summaries
(``alarms.windows.PeriodInputs``); here the period's mature rows are one
``Summary.from_arrays(p, y_state)`` of the simulated cases, so the kinds'
own ``decide`` judges exactly what it would judge in the service:

* ``log_loss_sums``: ``stats.window_tests.log_loss_sums`` of the period's
  mature rows under the model's counting (implicit negatives count as 0);
* ``reference_log_loss_sums``: the same of the reference's mature rows
  (``alarms.windows.references_of``: a traffic reference of an
  implicit-negative model counts its unlabeled mature rows as 0);
* ``metric(key)``: the period's value as ``rollup.query.period_metrics``
  gives it (the function the metrics API and the service's window rules
  use), with the reference's every prediction for score drift. All of
  ``period_metrics`` costs ~10 ms a period and a bench year judges ~300, so
  the keys the default rules read are computed alone, by the very functions
  ``period_metrics`` / ``stats.summary_metrics.all_metrics`` call for them
  (``FAST_KEYS``; tests/bench/test_null_year_small.py checks they equal
  ``period_metrics``); any other key computes ``period_metrics`` once.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from calibrant.rollup.periods import Period
from calibrant.rollup.query import DaySlices, apply_floors, period_metrics
from calibrant.stats import summary_binned, summary_metrics
from calibrant.stats.result import Estimate
from calibrant.stats.summary import LabeledBins, Summary
from calibrant.stats.summary_drift import psi
from calibrant.stats.window_tests import LogLossSums, log_loss_sums

DAY_ZERO = datetime(2029, 1, 1, tzinfo=UTC)  # a Monday: simulated day 0 starts an ISO week


def instant(day: float) -> datetime:
    return DAY_ZERO + timedelta(days=day)


@dataclass(frozen=True, slots=True)
class SimModel:
    """What ``period_metrics`` reads of a model (the rest of ``store.tables.Model`` is not needed)."""

    implicit_negatives: bool
    outcome_horizon_days: float
    outcome_lag_days: float


@dataclass(frozen=True, slots=True)
class SimReferences:
    """The reference twice, as ``alarms.windows.References``: every prediction, and its mature rows' sums."""

    scores: Summary | None
    log_loss_sums: LogLossSums | None


def references(scores: Summary, outcomes: Summary, model: SimModel) -> SimReferences:
    """A traffic reference (``alarms.windows.references_of``); no labeled row gives no outcome reference."""
    sums = log_loss_sums(outcomes, model.implicit_negatives)
    return SimReferences(scores=None if scores.is_empty() else scores,
                         log_loss_sums=sums if sums.n > 0 else None)


# The keys of ``all_metrics`` computed from the labeled view alone, by the functions it calls for them.
_LABEL_KEYS: dict[str, Callable[[LabeledBins], Estimate]] = {
    "calibration_slope": lambda v: summary_binned.logistic_recalibration(v).slope,
    "calibration_slope_robust": summary_metrics.calibration_slope_robust,
    "n_clipped": summary_metrics.n_clipped,
    "n_confident_errors": summary_metrics.n_confident_errors,
}
FAST_KEYS = (*_LABEL_KEYS, "psi")


class SimPeriod:
    """One stream's closed, mature period (``WindowInputs``); its metrics are computed on first use."""

    def __init__(self, summary: Summary, start_day: float, end_day: float, model: SimModel,
                 refs: SimReferences) -> None:
        self.summary = summary
        self._period = Period(instant(start_day), instant(end_day))
        self._model = model
        self._refs = refs
        self._metrics: dict[str, Estimate] | None = None
        self._fast: dict[str, Estimate] = {}

    def log_loss_sums(self) -> LogLossSums:
        return log_loss_sums(self.summary, self._model.implicit_negatives)

    def reference_log_loss_sums(self) -> LogLossSums | None:
        return self._refs.log_loss_sums

    def metric(self, key: str) -> Estimate:
        if self._metrics is not None or key not in FAST_KEYS or (key == "psi" and self._refs.scores is None):
            return self.all_metrics()[key]
        if key not in self._fast:
            if key == "psi":  # every row of the period is mature, so "everything" is the summary
                self._fast[key] = psi(self.summary, self._refs.scores)
            else:  # the registry's floors apply here as in period_metrics
                fast = {key: _LABEL_KEYS[key](self.summary.labeled(self._model.implicit_negatives))}
                counts = self.summary.counts()
                unlabeled = counts["unlabeled"] if self._model.implicit_negatives else 0.0
                apply_floors(fast, counts["positive"], counts["negative"] + unlabeled)
                self._fast[key] = fast[key]
        return self._fast[key]

    def all_metrics(self) -> dict[str, Estimate]:
        """``rollup.query.period_metrics`` of the period, computed once."""
        if self._metrics is None:
            days = DaySlices(mature={self._period.start: self.summary}, immature={})
            self._metrics = period_metrics(self._period, days, self._model, self._refs.scores)
        return self._metrics
