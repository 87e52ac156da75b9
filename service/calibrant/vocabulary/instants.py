"""RFC 3339 timestamps: an offset is mandatory, because a naive time is not an instant.

Two kinds of bound keep every later date computation (hours, ISO weeks, months, trailing
windows of up to 366 days) far from the ends of Python's calendar (years 1 and 9999):

- an instant a client *stores* (``scored_at``, ``observed_at``, and any event time added
  later) must lie in the server's ``InstantWindow``: by default from 2000-01-01 to one day
  after the server's clock, both configurable (``CALIBRANT_EARLIEST_INSTANT``,
  ``CALIBRANT_FUTURE_TOLERANCE_HOURS``). One time in the year 9999 would otherwise sit in
  every refresh of its model for ever;
- an instant a client *asks about* (``start``/``end`` of a query) must lie in the years
  1900 to 2999.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from calibrant.config import Settings
from calibrant.errors import invalid

QUERY_EARLIEST = datetime(1900, 1, 1, tzinfo=UTC)
QUERY_LATEST = datetime(3000, 1, 1, tzinfo=UTC)

_RFC3339 = re.compile(
    r"\d{4}-\d{2}-\d{2}[Tt ]\d{2}:\d{2}:\d{2}(?:\.\d{1,9})?(?:[Zz]|[+-]\d{2}:\d{2})"
)


def parse_instant(text: object) -> datetime | str:
    """Return the UTC instant, or a message saying what is wrong with ``text``.

    Returning the message instead of raising keeps the per-item loop of batch
    validation cheap: most batches are clean and exceptions cost more than a
    type check.

    An aware ``datetime`` is taken as the instant it is: file imports parse their time columns
    column-wise (``files.reading``) and hand those over; a JSON body never holds one.
    """
    if isinstance(text, datetime):
        if text.tzinfo is UTC:
            return text
        if text.tzinfo is None or text.utcoffset() is None:
            return "has no UTC offset; add Z or +hh:mm (naive times are ambiguous)"
        return text.astimezone(UTC)
    if not isinstance(text, str):
        return "must be an RFC 3339 string such as 2026-03-01T12:00:00Z"
    if not _RFC3339.fullmatch(text):
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}[Tt ]\d{2}:\d{2}:\d{2}(?:\.\d+)?", text):
            return "has no UTC offset; add Z or +hh:mm (naive times are ambiguous)"
        return "must be an RFC 3339 date-time with offset, e.g. 2026-03-01T12:00:00Z"
    try:
        return datetime.fromisoformat(text.upper()).astimezone(UTC)
    except (ValueError, OverflowError) as exc:  # an offset can push year 1 or 9999 off the calendar
        return f"is not a valid date-time ({exc})"


@dataclass(frozen=True, slots=True)
class InstantWindow:
    """The instants a client may store: ``earliest <= t <= latest`` (both inclusive)."""

    earliest: datetime
    latest: datetime

    @classmethod
    def of(cls, settings: Settings, now: datetime) -> InstantWindow:
        """The configured window at the server's (injected) ``now``."""
        return cls(settings.earliest_instant, now + timedelta(hours=settings.future_tolerance_hours))

    def refusal(self, when: datetime) -> str | None:
        """None when ``when`` is inside; else a message naming the bound it crosses."""
        if when < self.earliest:
            return f"is before the earliest accepted instant {_rfc3339(self.earliest)}"
        if when > self.latest:
            return (
                f"is after the latest accepted instant {_rfc3339(self.latest)} "
                "(the server's clock plus the configured tolerance)"
            )
        return None


def parse_instant_within(text: object, window: InstantWindow) -> datetime | str:
    """``parse_instant``, then the window: the instant, or a message naming the bound."""
    parsed = parse_instant(text)
    if isinstance(parsed, str):
        return parsed
    return window.refusal(parsed) or parsed


def require_instant_within(
    field: str, text: object, window: InstantWindow, index: int | None = None
) -> datetime:
    """The one check of a stored event time: a 422 naming ``field`` and the bound otherwise."""
    parsed = parse_instant_within(text, window)
    if isinstance(parsed, str):
        raise invalid(field, parsed, index)
    return parsed


def required_instant(name: str, text: str | None) -> datetime:
    """A query parameter that must be an RFC 3339 instant in the years 1900-2999; a 422 naming
    ``name`` otherwise."""
    if text is None:
        raise invalid(name, "required: an RFC 3339 date-time with offset")
    parsed = parse_instant(text)
    if isinstance(parsed, str):
        raise invalid(name, parsed)
    if not QUERY_EARLIEST <= parsed < QUERY_LATEST:
        raise invalid(name, "must lie in the years 1900 to 2999")
    return parsed


def _rfc3339(when: datetime) -> str:
    return when.astimezone(UTC).isoformat().replace("+00:00", "Z")
