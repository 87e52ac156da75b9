"""Time as a dependency, so tests can fix it instead of sleeping."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Protocol


class Clock(Protocol):
    def now(self) -> datetime:
        """The current instant, timezone-aware UTC."""
        ...


class SystemClock:
    def now(self) -> datetime:
        return datetime.now(UTC)


class FixedClock:
    """A clock that moves only when told to (tests, backfills)."""

    def __init__(self, start: datetime) -> None:
        if start.tzinfo is None:
            raise ValueError("FixedClock needs a timezone-aware start")
        self._now = start

    def now(self) -> datetime:
        return self._now

    def advance(self, delta: timedelta) -> None:
        self._now += delta

    def set(self, instant: datetime) -> None:
        self._now = instant


def rfc3339(at: datetime) -> str:
    """An instant as RFC 3339 text in UTC ending in ``Z``: the one way a time leaves Calibrant."""
    if at.tzinfo is None or at.utcoffset() is None:
        raise ValueError("times are instants; got a naive datetime")
    return at.astimezone(UTC).isoformat().replace("+00:00", "Z")
