"""When to try a failed delivery again: exponential backoff with jitter, Retry-After, a window.

Pure functions of their inputs (the random source is passed in), so the
schedule is tested without waiting.
"""

from __future__ import annotations

import random
from datetime import UTC, datetime, timedelta
from email.utils import parsedate_to_datetime

# Each delay is drawn from [(1 - JITTER) * d, d]: spreading retries of many
# deliveries that failed together (one receiver outage) so they do not return
# as one burst, while never retrying sooner than half the nominal delay.
JITTER = 0.5


def retry_delay(failed_attempts: int, base_seconds: float, max_seconds: float, rng: random.Random) -> float:
    """Seconds to wait after the ``failed_attempts``-th failure (1 = the first attempt failed)."""
    if failed_attempts < 1:
        raise ValueError("failed_attempts counts from 1")
    nominal = min(max_seconds, base_seconds * 2.0 ** min(failed_attempts - 1, 60))
    return nominal * (1.0 - JITTER * rng.random())


def parse_retry_after(value: str | None, now: datetime) -> datetime | None:
    """The instant a ``Retry-After`` header (RFC 9110 §10.2.3) names, or None if absent/invalid.

    It is either a number of seconds or an HTTP date; a date in the past means "now".
    """
    if value is None:
        return None
    text = value.strip()
    if text.isdigit():
        return now + timedelta(seconds=int(text))
    try:
        when = parsedate_to_datetime(text)
    except (TypeError, ValueError):
        return None
    if when.tzinfo is None:
        when = when.replace(tzinfo=UTC)  # RFC 9110 dates are always GMT
    return max(when, now)


def next_attempt(
    *,
    now: datetime,
    deadline: datetime,
    failed_attempts: int,
    base_seconds: float,
    max_seconds: float,
    rng: random.Random,
    retry_after: datetime | None = None,
) -> datetime | None:
    """When to attempt again after a failure at ``now``, or None to give up.

    The backoff is clipped to the deadline, so the last attempt happens at the
    end of the window and retries span all of it. A receiver's Retry-After is
    a floor; one that points past the deadline ends the delivery.
    """
    if now >= deadline:
        return None
    delay = retry_delay(failed_attempts, base_seconds, max_seconds, rng)
    when = min(now + timedelta(seconds=delay), deadline)
    if retry_after is not None:
        when = max(when, retry_after)
    return when if when <= deadline else None
