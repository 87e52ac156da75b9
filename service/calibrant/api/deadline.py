"""Every request's database work runs under a deadline; past it the caller gets 503 with Retry-After.

Two layers. The connections a request checks out carry ``request_seconds``
(``store.deadlines``): a connection past it is cut, the blocked call fails and
the database handler in ``api.problems`` answers 503. This middleware is the
backstop for whatever still has not answered a little later (a request that
went through several transactions, each within its own deadline): it answers
503 itself and leaves the handler to finish and be discarded. A response that
has already started is never interrupted.

``/v1/refresh`` (which with ``?wait=true`` waits for a refresh job, holding no connection
meanwhile) and a rule's backtest (``…/backtest``, which computes over a model's whole
history) are exempt: their deadline is the job's. They are the two routes not
bound by the request deadline (a backtest on a loaded machine took over 6 s).
"""

from __future__ import annotations

import asyncio
import contextlib
import logging

from calibrant.api.problems import unavailable
from calibrant.api.request_gate import ASGIApp, Message, Receive, Scope, Send
from calibrant.store.deadlines import request_scope

log = logging.getLogger("calibrant.api")
BACKSTOP_MARGIN_S = 1.0  # after the connection deadline, before the middleware answers itself
EXEMPT_PATHS = frozenset({"/v1/refresh"})


class RequestDeadline:
    """ASGI middleware; see the module docstring."""

    def __init__(self, app: ASGIApp, seconds: float, retry_after: int) -> None:
        self.app = app
        self.seconds = seconds
        self.retry_after = retry_after

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["path"] in EXEMPT_PATHS or scope["path"].endswith("/backtest"):
            await self.app(scope, receive, send)
            return
        started = False
        abandoned = False

        async def guarded_send(message: Message) -> None:
            nonlocal started
            if abandoned:
                return  # we answered 503 already; the late handler's answer goes nowhere
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        with request_scope(self.seconds):  # the task below copies this context, threads too
            task = asyncio.ensure_future(self.app(scope, receive, guarded_send))
        done, _ = await asyncio.wait({task}, timeout=self.seconds + BACKSTOP_MARGIN_S)
        if task in done or started:
            await task
            return
        abandoned = True
        task.add_done_callback(_forget)
        task.cancel()  # takes effect when its worker thread returns (its connection is being cut)
        log.warning("request past its deadline: %s %s answered 503", scope["method"], scope["path"])
        # The abandoned handler may still commit: say so, rather than claim nothing was stored.
        await unavailable(self.retry_after, f"no answer within {self.seconds:g} s; the request may "
                          "or may not take effect, and sending it again is harmless")(scope, receive, send)


def _forget(task: asyncio.Future[None]) -> None:
    """Retrieve an abandoned handler's outcome so asyncio does not report it as never retrieved."""
    with contextlib.suppress(BaseException):
        task.result()
