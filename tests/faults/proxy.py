"""A small asyncio TCP proxy between the service and PostgreSQL that can stall and drop connections.

It runs its own event loop in a thread of the test process. ``stall()`` stops
forwarding bytes in both directions while keeping every socket open, and keeps
new connections open without forwarding: what a network partition looks like
to both ends (nothing arrives, nothing is refused). ``drop()`` closes every
connection at once, as a restarted server or a reset path would. ``resume()``
forwards again; connections that stalled stay stalled, the way a real
partition leaves them, and only new ones work.
"""

from __future__ import annotations

import asyncio
import contextlib
import threading
from collections.abc import Iterator

HOST = "127.0.0.1"
CHUNK = 65536


class FaultProxy:
    def __init__(self, upstream_host: str, upstream_port: int) -> None:
        self.upstream = (upstream_host, upstream_port)
        self.port = 0
        self._loop = asyncio.new_event_loop()
        self._flowing = asyncio.Event()
        self._writers: set[asyncio.StreamWriter] = set()
        self._server: asyncio.base_events.Server | None = None
        self._thread = threading.Thread(target=self._loop.run_forever, name="fault-proxy", daemon=True)

    # ------------------------------------------------------------------ control (any thread)
    def start(self) -> None:
        self._thread.start()
        asyncio.run_coroutine_threadsafe(self._listen(), self._loop).result(timeout=10)

    def stall(self) -> None:
        self._call(self._flowing.clear)

    def resume(self) -> None:
        self._call(self._flowing.set)

    def drop(self) -> None:
        asyncio.run_coroutine_threadsafe(self._drop_all(), self._loop).result(timeout=10)

    def close(self) -> None:
        async def shutdown() -> None:
            if self._server is not None:
                self._server.close()
            await self._drop_all()
            pending = [t for t in asyncio.all_tasks() if t is not asyncio.current_task()]
            for task in pending:  # pipes stalled for good
                task.cancel()
            await asyncio.gather(*pending, return_exceptions=True)

        asyncio.run_coroutine_threadsafe(shutdown(), self._loop).result(timeout=10)
        self._loop.call_soon_threadsafe(self._loop.stop)
        self._thread.join(timeout=10)

    def _call(self, fn) -> None:
        done = threading.Event()

        def run() -> None:
            fn()
            done.set()

        self._loop.call_soon_threadsafe(run)
        done.wait(timeout=10)

    # ------------------------------------------------------------------ inside the loop
    async def _listen(self) -> None:
        self._flowing.set()
        self._server = await asyncio.start_server(self._serve, HOST, 0)
        self.port = self._server.sockets[0].getsockname()[1]

    async def _serve(self, client_r: asyncio.StreamReader, client_w: asyncio.StreamWriter) -> None:
        self._writers.add(client_w)
        await self._flowing.wait()  # a connection opened during a stall hangs, unanswered
        try:
            server_r, server_w = await asyncio.open_connection(*self.upstream)
        except OSError:
            client_w.close()
            self._writers.discard(client_w)
            return
        self._writers.add(server_w)
        await asyncio.gather(self._pipe(client_r, server_w), self._pipe(server_r, client_w),
                             return_exceptions=True)
        for w in (client_w, server_w):
            w.close()
            self._writers.discard(w)

    async def _pipe(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        while True:
            data = await reader.read(CHUNK)
            if not data:
                break
            if not self._flowing.is_set():
                await asyncio.Event().wait()  # stalled for good: this connection never moves again
            writer.write(data)
            await writer.drain()
        with contextlib.suppress(OSError):
            writer.write_eof()

    async def _drop_all(self) -> None:
        for w in list(self._writers):
            w.transport.abort()
        self._writers.clear()


@contextlib.contextmanager
def running_proxy(upstream_host: str, upstream_port: int) -> Iterator[FaultProxy]:
    proxy = FaultProxy(upstream_host, upstream_port)
    proxy.start()
    try:
        yield proxy
    finally:
        proxy.close()
