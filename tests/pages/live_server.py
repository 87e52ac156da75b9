"""The app on a real loopback port, in a thread of the test process, for the browser tests.

In-process (not a ``calibrant serve`` subprocess) so the test keeps the injected clock and
the database it seeded. uvicorn binds port 0 and reports the port it got; readiness is the
server's own ``started`` flag, polled with a deadline.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager

import uvicorn

from calibrant.app import create_app
from calibrant.clock import Clock
from tests.conftest import Database

START_DEADLINE_S = 20.0


@contextmanager
def serving(db: Database, clock: Clock, **settings: object) -> Iterator[str]:
    """Serve ``db`` on 127.0.0.1; yields the base URL."""
    app = create_app(db.settings(**settings), engine=db.engine, clock=clock)
    config = uvicorn.Config(app, host="127.0.0.1", port=0, log_level="warning", lifespan="on")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, name="pages-live-server", daemon=True)
    thread.start()
    deadline = time.monotonic() + START_DEADLINE_S
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            raise RuntimeError("the live server did not start")
        time.sleep(0.02)
    port = server.servers[0].sockets[0].getsockname()[1]
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)
