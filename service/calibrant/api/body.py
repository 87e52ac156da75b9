"""Reading request bodies with a hard size cap.

A declared Content-Length over the cap is refused before reading anything;
a chunked body is read only until it crosses the cap.
"""

from __future__ import annotations

from typing import Any

import orjson
from fastapi import Request

from calibrant.errors import FieldError, InvalidInput, PayloadTooLarge

SMALL_BODY = 64 * 1024  # a rule or a resolve note; batches are capped by Settings.max_body_bytes


async def read_capped(request: Request, limit: int) -> bytes:
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > limit:
        raise PayloadTooLarge(f"the body is {declared} bytes; the limit is {limit}")
    chunks: list[bytes] = []
    size = 0
    async for chunk in request.stream():
        size += len(chunk)
        if size > limit:
            raise PayloadTooLarge(f"the body exceeds the limit of {limit} bytes")
        chunks.append(chunk)
    return b"".join(chunks)


async def read_json_object(request: Request, limit: int = SMALL_BODY) -> dict[str, Any]:
    """A capped body holding one JSON object; an empty body is ``{}``."""
    body = await read_capped(request, limit)
    try:
        doc = orjson.loads(body or b"{}")
    except orjson.JSONDecodeError as exc:
        raise InvalidInput("body is not valid JSON", [FieldError(None, "body", str(exc))]) from None
    if not isinstance(doc, dict):
        raise InvalidInput("body must be an object", [FieldError(None, "body", "expected an object")])
    return doc
