"""Calendar periods in UTC: days, ISO weeks (Monday 00:00) and months, half-open."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from enum import StrEnum
from typing import Literal, get_args


class Granularity(StrEnum):
    DAY = "day"
    WEEK = "week"
    MONTH = "month"


# The values of Granularity as a type, for schemas; importing fails if the two ever list different names.
GranularityName = Literal["day", "week", "month"]
if tuple(g.value for g in Granularity) != get_args(GranularityName):
    raise RuntimeError("calibrant.rollup.periods: GranularityName and Granularity list different names")


@dataclass(frozen=True, slots=True)
class Period:
    start: datetime
    end: datetime
    window_start: datetime | None = None  # set when a trailing window is asked for

    @property
    def data_start(self) -> datetime:
        """Where the rows this period reports on begin: its own start or its window's."""
        return self.window_start if self.window_start is not None else self.start


def _floor(instant: datetime, granularity: Granularity) -> datetime:
    day = instant.astimezone(UTC).replace(hour=0, minute=0, second=0, microsecond=0)
    if granularity is Granularity.DAY:
        return day
    if granularity is Granularity.WEEK:
        return day - timedelta(days=day.weekday())
    return day.replace(day=1)


def _next(start: datetime, granularity: Granularity) -> datetime:
    if granularity is Granularity.DAY:
        return start + timedelta(days=1)
    if granularity is Granularity.WEEK:
        return start + timedelta(days=7)
    return start.replace(year=start.year + 1, month=1) if start.month == 12 else start.replace(
        month=start.month + 1
    )


def period_count(start: datetime, end: datetime, granularity: Granularity) -> int:
    """How many periods ``periods(start, end, granularity)`` would build, without building one.

    Callers check it against their cap first: a range of centuries would otherwise build
    hundreds of thousands of periods before any cap could apply.
    """
    if end <= start:
        return 0
    first = _floor(start, granularity)
    last = _floor(end - timedelta(microseconds=1), granularity)  # the period holding end's last instant
    if granularity is Granularity.MONTH:
        return (last.year - first.year) * 12 + last.month - first.month + 1
    step = 7 if granularity is Granularity.WEEK else 1
    return (last - first).days // step + 1


def periods(
    start: datetime, end: datetime, granularity: Granularity, window_days: int | None = None
) -> list[Period]:
    """Every whole calendar period overlapping [start, end), oldest first.

    With ``window_days`` each period also reports a trailing window of that many
    days ending at the period's end.
    """
    out: list[Period] = []
    cursor = _floor(start, granularity)
    while cursor < end:
        nxt = _next(cursor, granularity)
        window = nxt - timedelta(days=window_days) if window_days else None
        out.append(Period(cursor, nxt, window))
        cursor = nxt
    return out
