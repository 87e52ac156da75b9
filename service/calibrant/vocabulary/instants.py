"""RFC 3339 timestamps: an offset is mandatory, because a naive time is not an instant."""

from __future__ import annotations

import re
from datetime import UTC, datetime

from calibrant.errors import invalid

_RFC3339 = re.compile(
    r"\d{4}-\d{2}-\d{2}[Tt ]\d{2}:\d{2}:\d{2}(?:\.\d{1,9})?(?:[Zz]|[+-]\d{2}:\d{2})"
)


def parse_instant(text: object) -> datetime | str:
    """Return the UTC instant, or a message saying what is wrong with ``text``.

    Returning the message instead of raising keeps the per-item loop of batch
    validation cheap: most batches are clean and exceptions cost more than a
    type check.
    """
    if not isinstance(text, str):
        return "must be an RFC 3339 string such as 2026-03-01T12:00:00Z"
    if not _RFC3339.fullmatch(text):
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}[Tt ]\d{2}:\d{2}:\d{2}(?:\.\d+)?", text):
            return "has no UTC offset; add Z or +hh:mm (naive times are ambiguous)"
        return "must be an RFC 3339 date-time with offset, e.g. 2026-03-01T12:00:00Z"
    try:
        parsed = datetime.fromisoformat(text.upper())
    except ValueError as exc:
        return f"is not a valid date-time ({exc})"
    return parsed.astimezone(UTC)


def required_instant(name: str, text: str | None) -> datetime:
    """A query parameter that must be an RFC 3339 instant; a 422 naming ``name`` otherwise."""
    if text is None:
        raise invalid(name, "required: an RFC 3339 date-time with offset")
    parsed = parse_instant(text)
    if isinstance(parsed, str):
        raise invalid(name, parsed)
    return parsed
