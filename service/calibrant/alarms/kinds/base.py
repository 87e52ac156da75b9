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


def window_false_alarms_per_year(level: float, granularity: str, streams: int) -> float:
    """level × evaluations per year × streams: each period's test is made once, at its level, per stream."""
    return level * EVALUATIONS_PER_YEAR[granularity] * max(streams, 1)


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
class FeedInputs:
    """The feeds of a model now: hours since its last prediction (None: never), and the mature window."""

    silence_hours: float | None
    mature: float
    unlabeled: float


class Describe(Protocol):
    """What a rule detects, the data it needs and its false-alarm statement, for the API."""

    def __call__(self, params: Any, *, streams: int, chart_streams: int) -> dict[str, Any]: ...


@dataclass(frozen=True, slots=True)
class KindSpec:
    """What the registry holds for a kind: its parameters model and its self-description."""

    evaluation: ClassVar[Evaluation]
    params: type[Params]
    describe: Describe


@dataclass(frozen=True, slots=True)
class ChartKind(KindSpec):
    """``decide`` advances a stream's chart over its next cases (p, y), in order."""

    evaluation: ClassVar[Evaluation] = "chart"
    decide: Callable[[CusumState, np.ndarray, np.ndarray], CusumStep]


@dataclass(frozen=True, slots=True)
class WindowKind(KindSpec):
    """``decide`` judges one stream's closed, mature period."""

    evaluation: ClassVar[Evaluation] = "window"
    decide: Callable[[Any, WindowInputs], Decision]


@dataclass(frozen=True, slots=True)
class FeedKind(KindSpec):
    """``decide`` judges the model's feeds now."""

    evaluation: ClassVar[Evaluation] = "feed"
    decide: Callable[[Any, FeedInputs], Decision]
