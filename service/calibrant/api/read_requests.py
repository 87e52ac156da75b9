"""GET and HEAD requests read only: their transactions begin deferred on SQLite, so they never queue
behind a writer (a refresh storing summaries, an ingest). See ``store.engine``.

In WAL mode a deferred transaction reads the last committed snapshot without taking any lock
a writer holds. A few GETs write once in a while (the first read of a model's rules creates its
default rules; a report stores its snapshot): such a unit of work, refused the lock or working
on an outdated snapshot, runs again as a writer (``store.unit.run_unit_of_work``).
"""

from __future__ import annotations

from calibrant.api.request_gate import ASGIApp, Receive, Scope, Send
from calibrant.store.unit import read_only

READ_METHODS = frozenset({"GET", "HEAD"})


class ReadOnlyRequests:
    """ASGI middleware: a GET or HEAD request's database work runs inside ``store.unit.read_only``."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] not in READ_METHODS:
            await self.app(scope, receive, send)
            return
        with read_only():  # the handler's task and its worker threads copy this context
            await self.app(scope, receive, send)
