"""The one error tree of the service.

::

    CalibrantError              (500, never raised for bad input)
    ├── InvalidInput            (422, carries field errors)
    ├── PayloadTooLarge         (413)
    ├── NotFound                (404)
    ├── Conflict                (409, carries the conflicting keys)
    ├── Unauthenticated         (401)
    └── Forbidden               (403)

Each knows its HTTP status; ``api.problems`` renders any of them as an
RFC 9457 problem document. Services raise these and never import FastAPI.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Protocol


@dataclass(frozen=True, slots=True)
class FieldError:
    """One bad value: which item of a batch (or None for the body), which field, why."""

    index: int | None
    field: str
    message: str

    def as_dict(self) -> dict[str, Any]:
        return {"index": self.index, "field": self.field, "message": self.message}


class CalibrantError(Exception):
    status = 500
    title = "Internal error"
    slug = "internal"

    def __init__(self, detail: str) -> None:
        super().__init__(detail)
        self.detail = detail

    def extensions(self) -> dict[str, Any]:
        """Members added to the problem document beside type/title/status/detail."""
        return {}


class InvalidInput(CalibrantError):
    status = 422
    title = "Invalid input"
    slug = "invalid-input"

    def __init__(self, detail: str, errors: list[FieldError]) -> None:
        super().__init__(detail)
        self.errors = errors

    def extensions(self) -> dict[str, Any]:
        return {"errors": [e.as_dict() for e in self.errors]}


class PayloadTooLarge(CalibrantError):
    status = 413
    title = "Payload too large"
    slug = "payload-too-large"


class NotFound(CalibrantError):
    status = 404
    title = "Not found"
    slug = "not-found"


class Conflict(CalibrantError):
    status = 409
    title = "Conflicting content"
    slug = "conflict"

    def __init__(self, detail: str, conflicts: list[dict[str, Any]]) -> None:
        super().__init__(detail)
        self.conflicts = conflicts

    def extensions(self) -> dict[str, Any]:
        return {"conflicts": self.conflicts}


class Unauthenticated(CalibrantError):
    status = 401
    title = "Authentication required"
    slug = "unauthenticated"


class Forbidden(CalibrantError):
    status = 403
    title = "Forbidden"
    slug = "forbidden"


def invalid(field: str, message: str, index: int | None = None) -> InvalidInput:
    """Shorthand for a single-field 422."""
    return InvalidInput(f"{field}: {message}", [FieldError(index, field, message)])


class HasErrorItems(Protocol):
    """pydantic's ``ValidationError``, and FastAPI's ``RequestValidationError`` (the same items)."""

    def errors(self) -> Sequence[Any]: ...


def field_errors(
    exc: HasErrorItems, prefix: str = "", *, whole: str = "body", source_first: bool = False
) -> list[FieldError]:
    """The one translation of pydantic's error items into ``FieldError``s.

    An item's ``loc`` becomes a dotted field name under ``prefix`` ("params" + ("window",)
    is ``params.window``). An item with no location is about the document as a whole and is
    named ``prefix``, or ``whole`` without one. With ``source_first`` (FastAPI's request errors)
    the first element says where the value was read from ("body", "query", "path") and is
    dropped, unless nothing follows it.
    """
    out = []
    for item in exc.errors():
        loc = [str(part) for part in item["loc"]]
        if source_first and len(loc) > 1:
            loc = loc[1:]
        name = ".".join(part for part in (prefix, *loc) if part)
        out.append(FieldError(None, name or whole, item["msg"]))
    return out
