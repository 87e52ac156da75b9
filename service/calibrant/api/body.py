"""Reading request bodies with a hard size cap.

A declared Content-Length over the cap is refused before reading anything;
a chunked body is read only until it crosses the cap.
"""

from __future__ import annotations

from fastapi import Request

from calibrant.errors import PayloadTooLarge


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
