"""A local webhook receiver (127.0.0.1) that verifies each Standard Webhooks signature and prints alarms.

The verification is written here from the Standard Webhooks scheme with the
standard library only, as a receiver of yours would be: it shares no code with
the service's signer, so the demo checks the signatures rather than trusting them.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

TOLERANCE_SECONDS = 300  # refuse requests signed longer ago than this (replays)


def signature_is_valid(secret: str, headers: dict[str, str], body: bytes, now: float) -> bool:
    """HMAC-SHA256 of ``{webhook-id}.{webhook-timestamp}.{body}`` under the base64-decoded secret."""
    try:
        msg_id, stamp, signatures = (headers["webhook-id"], headers["webhook-timestamp"],
                                     headers["webhook-signature"])
        if abs(now - int(stamp)) > TOLERANCE_SECONDS:
            return False
        key = base64.b64decode(secret.removeprefix("whsec_"))
    except (KeyError, ValueError):
        return False
    digest = hmac.new(key, f"{msg_id}.{stamp}.".encode() + body, hashlib.sha256).digest()
    expected = base64.b64encode(digest).decode()
    return any(version == "v1" and hmac.compare_digest(value, expected)
               for version, _, value in (part.partition(",") for part in signatures.split()))


@dataclass(frozen=True)
class Delivery:
    webhook_id: str
    valid: bool
    event: dict | None  # parsed only when the signature is valid
    headers: dict[str, str]  # as received, so a caller can check the signature itself
    body: bytes


class WebhookReceiver:
    """Accepts POSTs on 127.0.0.1; ``secret`` is set once the webhook is registered."""

    def __init__(self, on_event: Callable[[Delivery], None] = lambda _d: None) -> None:
        self.secret = ""
        self.deliveries: list[Delivery] = []
        self._on_event = on_event
        self._lock = threading.Lock()
        self._seen: set[str] = set()
        self._server = ThreadingHTTPServer(("127.0.0.1", 0), self._handler())
        self._thread = threading.Thread(target=self._server.serve_forever, daemon=True)

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self._server.server_address[1]}/calibrant"

    def _handler(self) -> type[BaseHTTPRequestHandler]:
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:
                body = self.rfile.read(int(self.headers.get("content-length") or 0))
                headers = {k.lower(): v for k, v in self.headers.items()}
                receiver.accept(headers, body)
                self.send_response(204)
                self.end_headers()

            def log_message(self, *_args: object) -> None:  # the demo prints its own lines
                return

        return Handler

    def accept(self, headers: dict[str, str], body: bytes) -> None:
        valid = signature_is_valid(self.secret, headers, body, time.time())
        msg_id = headers.get("webhook-id", "")
        with self._lock:
            if valid and msg_id in self._seen:  # a retry of an event already handled
                return
            self._seen.add(msg_id)
            delivery = Delivery(msg_id, valid, json.loads(body) if valid else None, headers, body)
            self.deliveries.append(delivery)
        self._on_event(delivery)

    def alarms(self) -> list[dict]:
        with self._lock:
            return [d.event for d in self.deliveries
                    if d.valid and d.event and d.event.get("type") == "alarm.opened"]

    def __enter__(self) -> WebhookReceiver:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._server.shutdown()
        self._server.server_close()
