"""Every error leaves as an RFC 9457 problem document (application/problem+json)."""

from __future__ import annotations

import logging
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from calibrant.errors import CalibrantError, field_errors
from calibrant.store.unit import DatabaseError, is_unavailable

log = logging.getLogger("calibrant.api")
PROBLEM_TYPE_BASE = "https://calibrant.invalid/problems/"
MEDIA_TYPE = "application/problem+json"


def problem(status: int, title: str, detail: str, slug: str, *, retry_after: int | None = None,
            **extra: Any) -> JSONResponse:
    body = {"type": PROBLEM_TYPE_BASE + slug, "title": title, "status": status, "detail": detail}
    body.update(extra)
    headers = {"WWW-Authenticate": "Bearer"} if status == 401 else {}
    if retry_after is not None:
        headers["Retry-After"] = str(retry_after)
    return JSONResponse(body, status_code=status, media_type=MEDIA_TYPE, headers=headers or None)


def unavailable(retry_after: int, detail: str) -> JSONResponse:
    """503: the database cannot answer now; nothing of this request was committed."""
    return problem(503, "Database unavailable", detail, "database-unavailable", retry_after=retry_after)


def install(app: FastAPI, retry_after: int = 5) -> None:
    @app.exception_handler(DatabaseError)
    async def _database(_request: Request, exc: DatabaseError) -> JSONResponse:
        if is_unavailable(exc):
            first_line = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            log.warning("database unavailable: %s", first_line)
            return unavailable(retry_after, "the database did not answer in time or is down; "
                               "nothing was stored, try again later")
        log.exception("database error", exc_info=exc)
        return problem(500, "Internal error", "an unexpected error occurred; it was logged", "internal")

    @app.exception_handler(CalibrantError)
    async def _ours(_request: Request, exc: CalibrantError) -> JSONResponse:
        if exc.status >= 500:
            log.exception("internal error", exc_info=exc)
        return problem(exc.status, exc.title, exc.detail, exc.slug, **exc.extensions())

    @app.exception_handler(RequestValidationError)
    async def _validation(_request: Request, exc: RequestValidationError) -> JSONResponse:
        errors = [e.as_dict() for e in field_errors(exc, source_first=True)]
        return problem(422, "Invalid input", "the request is invalid", "invalid-input", errors=errors)

    @app.exception_handler(StarletteHTTPException)
    async def _http(_request: Request, exc: StarletteHTTPException) -> JSONResponse:
        return problem(exc.status_code, str(exc.detail), str(exc.detail), f"http-{exc.status_code}")

    @app.exception_handler(Exception)
    async def _unexpected(_request: Request, exc: Exception) -> JSONResponse:
        log.exception("unhandled error", exc_info=exc)
        return problem(500, "Internal error", "an unexpected error occurred; it was logged", "internal")
