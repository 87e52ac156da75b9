"""A real HTTP receiver on 127.0.0.1 for webhook tests, and an independent signature check.

The check is written from the Standard Webhooks specification with hmac,
hashlib and base64 only — it shares no code with ``calibrant.notify.signing``.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import threading
import time
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


def verify_standard_webhook(secret: str, headers: dict[str, str], body: bytes) -> bool:
    """True if one of the ``v1`` signatures is the HMAC-SHA256 of ``{id}.{timestamp}.{body}``."""
    key = base64.b64decode(secret[len("whsec_"):])
    signed = headers["webhook-id"].encode() + b"." + headers["webhook-timestamp"].encode() + b"." + body
    expected = base64.b64encode(hmac.new(key, signed, hashlib.sha256).digest()).decode()
    for entry in headers["webhook-signature"].split(" "):
        version, _, value = entry.partition(",")
        if version == "v1" and hmac.compare_digest(value, expected):
            return True
    return False


@dataclass(frozen=True)
class Reply:
    status: int = 200
    headers: dict[str, str] = field(default_factory=dict)
    delay_seconds: float = 0.0  # only to provoke a client timeout


@dataclass(frozen=True)
class Received:
    path: str
    headers: dict[str, str]
    body: bytes

    @property
    def json(self) -> dict:
        return json.loads(self.body)


class Receiver:
    """Records every POST; answers from a script of replies, then with ``default``."""

    def __init__(self, default: Reply | None = None) -> None:
        self.default = default or Reply()
        self.script: list[Reply] = []
        self.received: list[Received] = []
        self.port = 0
        self._lock = threading.Lock()
        self._server: ThreadingHTTPServer | None = None
        self._thread: threading.Thread | None = None

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}/hook"

    def start(self) -> Receiver:
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                length = int(self.headers.get("content-length", "0"))
                body = self.rfile.read(length)
                headers = {k.lower(): v for k, v in self.headers.items()}
                with receiver._lock:
                    receiver.received.append(Received(self.path, headers, body))
                    reply = receiver.script.pop(0) if receiver.script else receiver.default
                if reply.delay_seconds:
                    time.sleep(reply.delay_seconds)
                self.send_response(reply.status)
                for name, value in reply.headers.items():
                    self.send_header(name, value)
                self.send_header("content-length", "0")
                self.end_headers()

            def log_message(self, *_args: object) -> None:
                pass

        server = ThreadingHTTPServer(("127.0.0.1", self.port), Handler)
        server.daemon_threads = True
        self.port = server.server_address[1]
        self._server = server
        self._thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.05})
        self._thread.daemon = True
        self._thread.start()
        return self

    def stop(self) -> None:
        """Close the listening socket: connections to the port are refused until ``start``."""
        if self._server is not None:
            self._server.shutdown()
            self._server.server_close()
            assert self._thread is not None
            self._thread.join(timeout=5)
            self._server = None

    def ids(self) -> list[str]:
        with self._lock:
            return [r.headers["webhook-id"] for r in self.received]
