"""What every rule kind shares: its parameter base, its verdict, the inputs it is judged on, its spec.

A kind is judged one of three ways (``Evaluation``): a *chart* consumes mature
cases one at a time (``alarms.charts``); a *window* rule judges each closed,
mature calendar period once (``alarms.windows``); a *feed* rule looks at the
feeds at every evaluation (``alarms.feeds``). Nothing here touches the database.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, ClassVar, Literal, Protocol

import numpy as np
from pydantic import BaseModel, ConfigDict

from calibrant.stats.cusum import CusumState, CusumStep
from calibrant.stats.result import Estimate
from calibrant.stats.window_tests import LogLossSums

Evaluation = Literal["chart", "window", "feed"]
Granularity = Literal["day", "week", "month"]
EVALUATIONS_PER_YEAR = {"day": 365.25, "week": 365.25 / 7, "month": 12.0}


# Smallest budget weight: a share of B × w / Σw must stay a positive float (5e-324 underflows to 0).
MIN_BUDGET_WEIGHT = 0.001


class Params(BaseModel):
    """Every kind's parameters: an unknown field is an error, never silently ignored."""

    model_config = ConfigDict(extra="forbid")


@dataclass(frozen=True, slots=True)
class Decision:
    """``crossed`` None: not enough data to judge (an open alarm then stays as it is)."""

    crossed: bool | None
    statistic: float | None
    n: int
    summary: str
    interval: tuple[float, float] | None = None
    detail: dict[str, Any] = field(default_factory=dict)


def whole(count: float) -> int:
    """A count summed from float summaries (a whole number held as a float) as the int it is."""
    return round(count)


class WindowInputs(Protocol):
    """One stream's closed, mature period, as a window kind reads it (computed on demand)."""

    def log_loss_sums(self) -> LogLossSums:
        """Sums of the period's labeled mature rows."""
        ...

    def reference_log_loss_sums(self) -> LogLossSums | None:
        """Sums of the model's labeled reference; None without one."""
        ...

    def metric(self, key: str) -> Estimate:
        """The period's value of a metrics-API key (``calibrant.vocabulary.metrics``)."""
        ...


@dataclass(frozen=True, slots=True)
class LabelCounts:
    """Mature predictions of a window, and how many of them have an outcome."""

    mature: int
    labeled: int

    @property
    def rate(self) -> float:
        return self.labeled / self.mature if self.mature else 0.0


@dataclass(frozen=True, slots=True)
class FeedInputs:
    """The feeds of a model now, as a feed kind reads them (built by ``alarms.feeds``).

    ``silence_hours``: hours since the newest prediction (None: never one).
    ``recent`` / ``history``: the two mature windows; None when they were not
    counted (implicit negatives, or no outcome horizon).
    """

    silence_hours: float | None
    implicit_negatives: bool
    has_horizon: bool
    recent: LabelCounts | None
    history: LabelCounts | None


class Describe(Protocol):
    """What a rule detects and the data it needs, for the API (its false-alarm share is the budget's)."""

    def __call__(self, params: Any) -> dict[str, str]: ...


def always(params: Any) -> bool:
    """``in_budget`` of a kind whose decision is always a test (its false alarms are in the budget)."""
    return True


@dataclass(frozen=True, slots=True)
class KindSpec:
    """What the registry holds for a kind: its parameters, its self-description, and whether a rule
    with given parameters makes a test whose false alarms count against the model's budget."""

    evaluation: ClassVar[Evaluation]
    params: type[Params]
    describe: Describe
    in_budget: Callable[[Any], bool]


@dataclass(frozen=True, slots=True)
class ChartKind(KindSpec):
    """``decide`` advances a stream's chart over its next cases (p, y), in order."""

    evaluation: ClassVar[Evaluation] = "chart"
    decide: Callable[[CusumState, np.ndarray, np.ndarray], CusumStep]


@dataclass(frozen=True, slots=True)
class WindowKind(KindSpec):
    """``decide(params, period, level)`` judges one stream's closed, mature period at a per-test level."""

    evaluation: ClassVar[Evaluation] = "window"
    decide: Callable[[Any, WindowInputs, float], Decision]


@dataclass(frozen=True, slots=True)
class FeedKind(KindSpec):
    """``decide(params, feeds, level)`` judges the model's feeds now at a per-test level."""

    evaluation: ClassVar[Evaluation] = "feed"
    decide: Callable[[Any, FeedInputs, float], Decision]
