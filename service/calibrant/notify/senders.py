"""Who actually sends a signed webhook request: one small interface, three implementations.

- ``HttpSender`` posts over the network with httpx, after checking the
  target's resolved address, and connects to exactly that address.
- ``LoggingSender`` only logs each request (local runs that must not call out).
- ``RecordingSender`` keeps every request and answers as a test scripts it.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol

import httpx

from calibrant.notify.targets import CheckedTarget, Resolver, TargetRefused, check_target, system_resolver

log = logging.getLogger("calibrant.notify")


@dataclass(frozen=True, slots=True)
class OutgoingRequest:
    url: str
    body: bytes
    headers: dict[str, str]
    timeout: float


@dataclass(frozen=True, slots=True)
class SendResult:
    """What an attempt produced. ``delivered`` only for a 2xx (or the logging sender)."""

    delivered: bool
    status_code: int | None
    latency_ms: float
    error: str | None = None
    retry_after: str | None = None  # the raw Retry-After header, if the receiver sent one


class Sender(Protocol):
    def send(self, request: OutgoingRequest) -> SendResult: ...


def response_result(status_code: int, latency_ms: float, retry_after: str | None = None) -> SendResult:
    return SendResult(
        delivered=200 <= status_code < 300,
        status_code=status_code,
        latency_ms=latency_ms,
        retry_after=retry_after,
    )


def pinned_request(url: str, target: CheckedTarget) -> tuple[httpx.URL, dict[str, str], dict[str, str]]:
    """The URL rewritten to the checked address, with the Host header and TLS name of the original.

    Connecting to the address that passed the check, rather than letting the
    client resolve the name again, closes the window in which a DNS answer
    could change between check and connect (DNS rebinding).
    """
    original = httpx.URL(url)
    pinned = original.copy_with(host=target.address)
    default_port = 443 if target.scheme == "https" else 80
    host_header = target.host if target.port == default_port else f"{target.host}:{target.port}"
    if ":" in target.host:  # an IPv6 literal needs its brackets back in the Host header
        host_header = f"[{target.host}]" if target.port == default_port else f"[{target.host}]:{target.port}"
    extensions = {"sni_hostname": target.host} if target.scheme == "https" else {}
    return pinned, {"host": host_header}, extensions


class HttpSender:
    """Posts the request with httpx; never follows redirects and ignores proxy variables."""

    def __init__(
        self,
        *,
        allow_private: bool,
        resolver: Resolver = system_resolver,
        transport: httpx.BaseTransport | None = None,
    ) -> None:
        self._allow_private = allow_private
        self._resolver = resolver
        # Redirects are not followed: a 3xx to an internal address would bypass the check.
        # Proxy variables are ignored: a proxy would connect to an address we never checked.
        self._client = httpx.Client(transport=transport, follow_redirects=False, trust_env=False)

    def send(self, request: OutgoingRequest) -> SendResult:
        started = time.perf_counter()

        def elapsed_ms() -> float:
            return (time.perf_counter() - started) * 1000.0

        try:
            target = check_target(request.url, allow_private=self._allow_private, resolver=self._resolver)
        except TargetRefused as exc:
            return SendResult(False, None, elapsed_ms(), f"refused: {exc}")
        url, host_header, extensions = pinned_request(request.url, target)
        try:
            response = self._client.post(
                url,
                content=request.body,
                headers={**request.headers, **host_header},
                extensions=extensions,
                timeout=request.timeout,
            )
        except httpx.TimeoutException as exc:
            error = f"timeout after {request.timeout:g} s ({type(exc).__name__})"
            return SendResult(False, None, elapsed_ms(), error)
        except httpx.HTTPError as exc:
            return SendResult(False, None, elapsed_ms(), f"{type(exc).__name__}: {exc}"[:500])
        return response_result(response.status_code, elapsed_ms(), response.headers.get("retry-after"))

    def close(self) -> None:
        self._client.close()


class LoggingSender:
    """Logs the request instead of sending it, and reports it delivered."""

    def send(self, request: OutgoingRequest) -> SendResult:
        log.info(
            "webhook (not sent, sender=log) %s webhook-id=%s body=%s",
            request.url,
            request.headers.get("webhook-id"),
            request.body.decode(),
        )
        return SendResult(delivered=True, status_code=None, latency_ms=0.0)


def _always_ok(_request: OutgoingRequest) -> SendResult:
    return response_result(200, 0.0)


@dataclass
class RecordingSender:
    """Keeps every request; ``respond`` decides each answer (default: 200)."""

    respond: Callable[[OutgoingRequest], SendResult] = _always_ok
    requests: list[OutgoingRequest] = field(default_factory=list)
    _lock: threading.Lock = field(default_factory=threading.Lock, repr=False)

    def send(self, request: OutgoingRequest) -> SendResult:
        with self._lock:
            self.requests.append(request)
        return self.respond(request)


def sender_from_settings(allow_private: bool, kind: str, resolver: Resolver = system_resolver) -> Sender:
    """The sender ``CALIBRANT_WEBHOOK_SENDER`` names: ``http`` or ``log``."""
    if kind == "log":
        return LoggingSender()
    return HttpSender(allow_private=allow_private, resolver=resolver)
