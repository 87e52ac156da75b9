"""A background buffer in front of ``Client``: scoring code adds items, a thread posts them in batches.

A scorer should not wait on the network for each case. ``BatchingSender``
collects predictions and outcomes and posts them when ``max_items`` are
waiting, when the oldest has waited ``max_seconds``, on ``flush()``, and on
``close()`` — which the context manager and an ``atexit`` hook call, so a
process that ends normally leaves nothing behind. Items are checked (naive
datetimes) when added, so mistakes surface in the caller, not in the thread.
A batch the server refuses (4xx) or that stays unreachable after the client's
retries is kept in ``failures`` with its items and reported to ``on_error``;
it is not silently dropped.
"""

from __future__ import annotations

import atexit
import logging
import threading
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from calibrant_client.client import CalibrantError, Client, encode_item

log = logging.getLogger("calibrant_client")
KINDS = ("predictions", "outcomes")


@dataclass(frozen=True)
class FailedBatch:
    kind: str
    items: list[dict[str, Any]]
    error: CalibrantError


def _log_failure(failure: FailedBatch) -> None:
    log.error("calibrant: %d %s not stored: %s", len(failure.items), failure.kind, failure.error)


class BatchingSender:
    """Thread-safe buffer of one model's predictions and outcomes."""

    def __init__(self, client: Client, model: str, *, max_items: int = 1000, max_seconds: float = 5.0,
                 clock: Callable[[], float] = time.monotonic,
                 on_error: Callable[[FailedBatch], None] = _log_failure, background: bool = True):
        if max_items < 1 or max_seconds <= 0:
            raise ValueError("max_items must be >= 1 and max_seconds > 0")
        self.client = client
        self.model = model
        self.max_items = max_items
        self.max_seconds = max_seconds
        self.failures: list[FailedBatch] = []
        self._clock = clock
        self._on_error = on_error
        self._pending: dict[str, list[dict[str, Any]]] = {kind: [] for kind in KINDS}
        self._oldest: float | None = None
        self._lock = threading.Lock()  # guards _pending and _oldest
        self._send_lock = threading.Lock()  # one flush at a time keeps batches in order
        self._closed = False
        self._wake = threading.Event()
        self._thread: threading.Thread | None = None
        atexit.register(self.close)
        if background:
            self._thread = threading.Thread(target=self._run, name="calibrant-buffer", daemon=True)
            self._thread.start()

    # ------------------------------------------------------------------ adding
    def add_prediction(self, item: Mapping[str, Any]) -> None:
        self._add("predictions", item)

    def add_outcome(self, item: Mapping[str, Any]) -> None:
        self._add("outcomes", item)

    def _add(self, kind: str, item: Mapping[str, Any]) -> None:
        encoded = encode_item(item)
        with self._lock:
            if self._closed:
                raise RuntimeError("this BatchingSender is closed")
            self._pending[kind].append(encoded)
            if self._oldest is None:
                self._oldest = self._clock()
            full = sum(len(v) for v in self._pending.values()) >= self.max_items
        if full:
            if self._thread is None:
                self.flush()
            else:
                self._wake.set()  # the thread sends it; the caller does not wait on the network

    @property
    def pending(self) -> int:
        with self._lock:
            return sum(len(v) for v in self._pending.values())

    # ------------------------------------------------------------------ sending
    def flush_if_due(self) -> bool:
        """Flush when the buffer is full or its oldest item has waited ``max_seconds``."""
        with self._lock:
            waiting = sum(len(v) for v in self._pending.values())
            due = waiting >= self.max_items or (
                self._oldest is not None and self._clock() - self._oldest >= self.max_seconds)
        if due:
            self.flush()
        return due

    def flush(self) -> None:
        """Send everything waiting now (predictions first), in the caller's thread."""
        with self._send_lock:
            with self._lock:
                taken = self._pending
                self._pending = {kind: [] for kind in KINDS}
                self._oldest = None
            for kind in KINDS:
                if taken[kind]:
                    self._send(kind, taken[kind])

    def _send(self, kind: str, items: list[dict[str, Any]]) -> None:
        try:
            if kind == "predictions":
                self.client.send_predictions(self.model, items)
            else:
                self.client.send_outcomes(self.model, items)
        except CalibrantError as exc:
            failure = FailedBatch(kind, items, exc)
            self.failures.append(failure)
            self._on_error(failure)

    def _run(self) -> None:
        # Wake at least every tenth of max_seconds so a time flush is late by at most that.
        tick = min(self.max_seconds / 10, 0.5)
        while not self._closed:
            self._wake.wait(tick)
            self._wake.clear()
            self.flush_if_due()

    # ------------------------------------------------------------------ ending
    def close(self) -> None:
        """Stop the thread and send what is left. Safe to call twice (atexit calls it too)."""
        with self._lock:
            if self._closed:
                return
            self._closed = True
        self._wake.set()
        if self._thread is not None:
            self._thread.join(timeout=60)
        self.flush()
        atexit.unregister(self.close)

    def __enter__(self) -> BatchingSender:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
