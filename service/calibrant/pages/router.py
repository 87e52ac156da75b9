"""The page routes: ``/``, a model, an alarm, sign-in and sign-out, and the pages' static files.

Read-only: a page runs one unit of work that only reads (``pages.views``); the one write is
the sign-in's session row. Errors of a page are rendered as a page with the same status;
the sign-in endpoint answers JSON problems like the API. Every page carries a Content
Security Policy that admits scripts, styles and requests from this host only.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import timedelta
from importlib import resources
from typing import Any, TypeVar
from urllib.parse import quote

import orjson
from fastapi import APIRouter, Request, Response
from fastapi.responses import HTMLResponse, RedirectResponse
from starlette.concurrency import run_in_threadpool

from calibrant.clock import Clock
from calibrant.config import Settings
from calibrant.errors import (
    CalibrantError,
    FieldError,
    Forbidden,
    InvalidInput,
    PayloadTooLarge,
    Unauthenticated,
)
from calibrant.pages import views
from calibrant.pages.access import COOKIE, LOCAL_READER, PageReader, reader_from_cookie
from calibrant.pages.rendering import render
from calibrant.store import keys_repo, page_sessions_repo
from calibrant.store.keys_repo import Scope
from calibrant.store.unit import Session, SessionFactory, run_unit_of_work

T = TypeVar("T")
SIGN_IN_BODY_LIMIT = 4096
STATIC_TYPES = {".js": "text/javascript; charset=utf-8", ".css": "text/css; charset=utf-8"}
SECURITY_HEADERS = {
    # Scripts, styles, images and requests from this host only: no page can reach another one.
    # The plotting library sets inline styles on the elements it draws, hence 'unsafe-inline' for style.
    "Content-Security-Policy": "default-src 'none'; script-src 'self'; style-src 'self' 'unsafe-inline'; "
                               "img-src 'self' data:; font-src 'self'; connect-src 'self'; "
                               "form-action 'self'; frame-ancestors 'none'; base-uri 'none'",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
}


class UnsupportedMediaType(CalibrantError):
    status = 415
    title = "Unsupported media type"
    slug = "unsupported-media-type"


@dataclass(frozen=True, slots=True)
class PageHost:
    """What the pages need of the running service; ``calibrant.app.create_app`` builds it."""

    settings: Settings
    sessions: SessionFactory
    clock: Clock

    async def read(self, work: Callable[[Session], T]) -> T:
        return await run_in_threadpool(run_unit_of_work, self.sessions, work)


def _static_file(name: str) -> tuple[bytes, str]:
    if name == "plotly.min.js":  # the plotting library's own bundle, as the installed package ships it
        return resources.files("plotly").joinpath("package_data", "plotly.min.js").read_bytes(), ".js"
    suffix = name[name.rfind("."):] if "." in name else ""
    if "/" in name or suffix not in STATIC_TYPES:
        raise FileNotFoundError(name)
    return resources.files("calibrant.pages").joinpath("static", name).read_bytes(), suffix


def figure_json(figure: dict[str, Any]) -> str:
    """A figure as JSON safe inside a <script type="application/json"> element."""
    return orjson.dumps(figure).decode().replace("</", "<\\/")


def build_router(host: PageHost) -> APIRouter:
    router = APIRouter(include_in_schema=False)
    static_cache: dict[str, tuple[bytes, str]] = {}

    def html(name: str, context: dict[str, Any], *, status: int = 200, started: float | None = None,
             reader: PageReader | None = None) -> HTMLResponse:
        signed_in = bool(reader and reader.actor != "local")
        body = render(name, {**context, "reader": reader, "signed_in": signed_in, "figure_json": figure_json})
        headers = dict(SECURITY_HEADERS)
        if started is not None:  # the page's own time in the server, read by tests/bench/pages.py
            headers["Server-Timing"] = f"page;dur={(time.perf_counter() - started) * 1000:.1f}"
        return HTMLResponse(body, status_code=status, headers=headers)

    def error_page(exc: CalibrantError, reader: PageReader | None) -> HTMLResponse:
        fields = [e.field for e in exc.errors] if isinstance(exc, InvalidInput) else []
        return html("error.html", {"title": exc.title, "detail": exc.detail, "fields": fields},
                    status=exc.status, reader=reader)

    async def page(request: Request, model: str | None,
                   view: Callable[[Session, PageReader], dict[str, Any]], template: str) -> Response:
        """Admit the reader, then gather the page in the same unit of work and render it."""
        started = time.perf_counter()
        now = host.clock.now()

        def work(session: Session) -> tuple[PageReader | None, dict[str, Any] | CalibrantError]:
            reader = (reader_from_cookie(session, request, now) if host.settings.keys_required
                      else LOCAL_READER)
            if reader is None:
                return None, {}
            if model is not None and not reader.may_read(model):
                return reader, _forbidden(reader)
            try:
                return reader, view(session, reader)
            except CalibrantError as exc:
                return reader, exc

        reader, gathered = await host.read(work)
        if reader is None:
            target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
            return RedirectResponse(f"/sign-in?next={quote(target, safe='')}", status_code=303,
                                    headers={"Cache-Control": "no-store"})
        if isinstance(gathered, CalibrantError):
            return error_page(gathered, reader)
        return html(template, gathered, started=started, reader=reader)

    @router.get("/", response_class=HTMLResponse)
    async def overview(request: Request) -> Response:
        def view(session: Session, reader: PageReader) -> dict[str, Any]:
            return {"models": views.overview(session, host.clock.now(), reader.model_name),
                    "now": host.clock.now()}

        return await page(request, None, view, "overview.html")

    @router.get("/models/{model}", response_class=HTMLResponse)
    async def model_page(request: Request, model: str, granularity: str | None = None,
                         start: str | None = None, end: str | None = None,
                         tag: str | None = None) -> Response:
        def view(session: Session, _reader: PageReader) -> dict[str, Any]:
            now = host.clock.now()
            span = views.page_range(granularity, start, end, now)
            return {**views.model_page(session, model, now, span, tag or None), "now": now}

        return await page(request, model, view, "model.html")

    @router.get("/models/{model}/alarms/{alarm_id}", response_class=HTMLResponse)
    async def alarm_page(request: Request, model: str, alarm_id: int) -> Response:
        def view(session: Session, _reader: PageReader) -> dict[str, Any]:
            return {**views.alarm_page(session, model, alarm_id), "now": host.clock.now()}

        return await page(request, model, view, "alarm.html")

    @router.get("/sign-in", response_class=HTMLResponse)
    async def sign_in_page(next: str = "/") -> Response:
        # Never send a reader to another site: a path on this host only ("//x" and "/\\x" name hosts).
        local = next.startswith("/") and not next.startswith(("//", "/\\"))
        return html("sign_in.html", {"next": next if local else "/",
                                     "keys_required": host.settings.keys_required})

    @router.post("/sign-in", status_code=204)
    async def sign_in(request: Request) -> Response:
        """Exchange a key sent as JSON ({"key": "cal_…"}) for a page session cookie."""
        key = await _key_from_json(request)
        lifetime = timedelta(hours=host.settings.page_session_hours)

        def work(session: Session) -> str:
            found = keys_repo.authenticate(session, key)
            if found is None:
                raise Unauthenticated("the key is unknown or revoked")
            if not Scope(found.scope).allows(Scope.READ):
                raise _forbidden_scope(found.scope)
            return page_sessions_repo.open_session(session, found.key_id, host.clock.now(), lifetime)

        token = await host.read(work)
        response = Response(status_code=204, headers={"Cache-Control": "no-store"})
        response.set_cookie(COOKIE, token, max_age=int(lifetime.total_seconds()), path="/", httponly=True,
                            samesite="strict", secure=request.url.scheme == "https")
        return response

    @router.post("/sign-out", status_code=204)
    async def sign_out(request: Request) -> Response:
        token = request.cookies.get(COOKIE)
        if token:
            await host.read(lambda session: page_sessions_repo.close_session(session, token))
        response = Response(status_code=204, headers={"Cache-Control": "no-store"})
        response.delete_cookie(COOKIE, path="/", httponly=True, samesite="strict")
        return response

    @router.get("/pages-static/{name}")
    async def static(name: str) -> Response:
        if name not in static_cache:
            try:
                static_cache[name] = await run_in_threadpool(_static_file, name)
            except (FileNotFoundError, OSError):
                return Response("not found", status_code=404, media_type="text/plain")
        body, suffix = static_cache[name]
        headers = {"Cache-Control": "public, max-age=3600", "X-Content-Type-Options": "nosniff"}
        return Response(body, media_type=STATIC_TYPES[suffix], headers=headers)

    return router


def _forbidden(reader: PageReader) -> CalibrantError:
    return Forbidden(f"this sign-in is limited to model {reader.model_name!r}")


def _forbidden_scope(scope: str) -> CalibrantError:
    return Forbidden(f"a key with scope {scope!r} cannot read; sign in with a read or admin key")


async def _key_from_json(request: Request) -> str:
    media = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media != "application/json":
        raise UnsupportedMediaType('send the key as application/json: {"key": "cal_..."}')
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > SIGN_IN_BODY_LIMIT:
        raise PayloadTooLarge(f"the body is {declared} bytes; the limit is {SIGN_IN_BODY_LIMIT}")
    body = await request.body()
    if len(body) > SIGN_IN_BODY_LIMIT:
        raise PayloadTooLarge(f"the body exceeds the limit of {SIGN_IN_BODY_LIMIT} bytes")
    try:
        document = orjson.loads(body or b"{}")
    except orjson.JSONDecodeError as exc:
        raise InvalidInput("body is not valid JSON", [FieldError(None, "body", str(exc))]) from None
    key = document.get("key") if isinstance(document, dict) else None
    if not isinstance(key, str) or not key.strip():
        raise InvalidInput("key: required", [FieldError(None, "key", "a non-empty string: the API key")])
    return key.strip()
