"""``Instant``: the one type of every time in a response, written as RFC 3339 in UTC ending in ``Z``."""

from __future__ import annotations

from typing import Annotated

from pydantic import AwareDatetime, PlainSerializer, WithJsonSchema

from calibrant.clock import rfc3339

# AwareDatetime: a naive time has no instant to convert, so it is refused, never guessed at.
Instant = Annotated[
    AwareDatetime,
    PlainSerializer(rfc3339, return_type=str, when_used="json"),
    WithJsonSchema(
        {"type": "string", "format": "date-time", "description": "RFC 3339 in UTC, ending in Z."},
        mode="serialization",
    ),
]
