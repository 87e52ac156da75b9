"""The one gate every request passes before routing: media type, encoding, size and NUL characters.

A request body must be ``application/json`` (any ``charset`` parameter), sent as is or with
``Content-Encoding: gzip``; anything else is a 415 naming what is accepted. This keeps a web
page from making a browser post a form (``text/plain``, ``application/x-www-form-urlencoded``,
``multipart/form-data`` need no preflight) to a keyless loopback server. Only requests that
carry a body are checked, so a GET, or a POST without a body (``/v1/refresh``), is unaffected.

The body is read here, at most ``max_body_bytes`` after decoding (413 beyond: a declared
length over the cap is refused before reading, a chunked or gzip body as soon as it crosses),
then handed on unchanged. A NUL character (U+0000) in the path, a query parameter or a JSON
string is refused with one 422 naming where it is: PostgreSQL cannot store it in text and
SQLite would, so refusing it at the door makes both databases answer alike.
"""

from __future__ import annotations

import re
import zlib
from collections.abc import Awaitable, Callable, MutableMapping
from typing import Any
from urllib.parse import parse_qsl

import orjson

from calibrant.api.problems import problem

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
ASGIApp = Callable[[Scope, Receive, Send], Awaitable[None]]

ACCEPTED_MEDIA_TYPE = "application/json"
ACCEPTED_ENCODINGS = ("gzip", "identity")
_BODY_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
_NUL_MESSAGE = "must not contain the NUL character (U+0000)"
# A JSON string escape \u0000 not itself escaped (an even run of backslashes before it).
_NUL_ESCAPE = re.compile(rb"(?<!\\)(?:\\\\)*\\u0000")


class RequestGate:
    """ASGI middleware; see the module docstring for the rules it keeps."""

    def __init__(self, app: ASGIApp, max_body_bytes: int) -> None:
        self.app = app
        self.max_body_bytes = max_body_bytes

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        refusal = _nul_in_address(scope)
        if refusal is None and scope["method"] in _BODY_METHODS and _has_body(scope):
            refusal = _media_type_refusal(scope)
            if refusal is None:
                body, refusal = await self._read_body(scope, receive)
                if refusal is None:
                    refusal = _nul_in_body(body)
                if refusal is None:
                    scope = _with_decoded_length(scope, len(body))
                    receive = _replay(body, receive)
        if refusal is not None:
            await refusal(scope, receive, send)
            return
        await self.app(scope, receive, send)

    async def _read_body(self, scope: Scope, receive: Receive) -> tuple[bytes, Any]:
        limit = self.max_body_bytes
        declared = _header(scope, b"content-length")
        gzipped = _header(scope, b"content-encoding").strip().lower() == "gzip"
        if declared.isdigit() and int(declared) > limit:
            return b"", _too_large(f"the body is {declared} bytes; the limit is {limit}")
        decoder = zlib.decompressobj(wbits=31) if gzipped else None  # 31: gzip header and trailer
        chunks: list[bytes] = []
        size = 0
        more = True
        while more:
            message = await receive()
            if message["type"] == "http.disconnect":
                break
            chunk = message.get("body", b"")
            more = message.get("more_body", False)
            if decoder is not None:
                try:
                    # Never inflate past the cap: a small gzip body can expand a thousandfold.
                    chunk = decoder.decompress(chunk, limit + 1 - size)
                except zlib.error as exc:
                    return b"", _invalid_body(f"the gzip body cannot be decoded ({exc})")
                if decoder.unconsumed_tail:
                    return b"", _too_large(f"the decoded body exceeds the limit of {limit} bytes")
            size += len(chunk)
            if size > limit:
                return b"", _too_large(f"the body exceeds the limit of {limit} bytes")
            chunks.append(chunk)
        if decoder is not None and not decoder.eof:
            return b"", _invalid_body("the gzip body is truncated")
        return b"".join(chunks), None


def _header(scope: Scope, name: bytes) -> str:
    for key, value in scope["headers"]:
        if key == name:
            return str(value.decode("latin-1"))
    return ""


def _has_body(scope: Scope) -> bool:
    length = _header(scope, b"content-length").strip()
    return (length not in ("", "0")) or bool(_header(scope, b"transfer-encoding"))


def _media_type_refusal(scope: Scope) -> Any:
    """None when the body is JSON in an accepted encoding; else the 415 to send."""
    declared = _header(scope, b"content-type")
    media_type = declared.split(";", 1)[0].strip().lower()
    encoding = _header(scope, b"content-encoding").strip().lower() or "identity"
    accepted = {"media_types": [ACCEPTED_MEDIA_TYPE], "encodings": list(ACCEPTED_ENCODINGS)}
    if media_type != ACCEPTED_MEDIA_TYPE:
        shown = declared or "none"
        return problem(
            415, "Unsupported media type",
            f"Content-Type {shown!r} is not accepted; send the body as application/json "
            "(any charset parameter)",
            "unsupported-media-type", accepted=accepted,
        )
    if encoding not in ACCEPTED_ENCODINGS:
        return problem(
            415, "Unsupported media type",
            f"Content-Encoding {encoding!r} is not accepted; send the body as is or gzip-compressed",
            "unsupported-media-type", accepted=accepted,
        )
    return None


def _nul_in_address(scope: Scope) -> Any:
    if "\x00" in scope["path"]:
        return _nul_refusal("path", None)
    query = scope.get("query_string", b"")
    if b"%00" in query or b"\x00" in query:
        for name, value in parse_qsl(query.decode("latin-1"), keep_blank_values=True):
            if "\x00" in name or "\x00" in value:
                return _nul_refusal(name.replace("\x00", "") or "query", None)
    return None


def _nul_in_body(body: bytes) -> Any:
    if b"\\u0000" not in body or not _NUL_ESCAPE.search(body):
        return None
    try:
        doc = orjson.loads(body)
    except orjson.JSONDecodeError:
        return None  # not JSON at all: the route's own parsing says so
    where = _first_nul(doc, [])
    if where is None:
        return None
    index = where[1] if len(where) >= 2 and isinstance(where[1], int) else None
    rest = where[2:] if index is not None else where
    field = ".".join(str(part) for part in rest) or "body"
    return _nul_refusal(field, index)


def _first_nul(value: object, path: list[str | int]) -> list[str | int] | None:
    """Where the first string holding a NUL is (a key counts as its own place)."""
    if isinstance(value, str):
        return path if "\x00" in value else None
    if isinstance(value, dict):
        for key, item in value.items():
            if "\x00" in key:
                return [*path, key.replace("\x00", "")]
            found = _first_nul(item, [*path, key])
            if found is not None:
                return found
    if isinstance(value, list):
        for position, item in enumerate(value):
            found = _first_nul(item, [*path, position])
            if found is not None:
                return found
    return None


def _nul_refusal(field: str, index: int | None) -> Any:
    return problem(
        422, "Invalid input", f"{field}: {_NUL_MESSAGE}", "invalid-input",
        errors=[{"index": index, "field": field, "message": _NUL_MESSAGE}],
    )


def _too_large(detail: str) -> Any:
    return problem(413, "Payload too large", detail, "payload-too-large")


def _invalid_body(message: str) -> Any:
    return problem(
        422, "Invalid input", f"body: {message}", "invalid-input",
        errors=[{"index": None, "field": "body", "message": message}],
    )


def _with_decoded_length(scope: Scope, length: int) -> Scope:
    """The scope as the routes should see it: the decoded body's length, no encoding left."""
    kept = [
        (k, v) for k, v in scope["headers"]
        if k not in (b"content-length", b"content-encoding", b"transfer-encoding")
    ]
    return {**scope, "headers": [*kept, (b"content-length", str(length).encode())]}


def _replay(body: bytes, original: Receive) -> Receive:
    """The whole body as one message; later calls wait on the client as before (disconnects)."""
    sent = False

    async def receive() -> Message:
        nonlocal sent
        if not sent:
            sent = True
            return {"type": "http.request", "body": body, "more_body": False}
        return await original()

    return receive
