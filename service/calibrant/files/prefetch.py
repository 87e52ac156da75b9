"""Read the next chunk of a file while the current one is stored.

On PostgreSQL a chunk's write is mostly waiting for the server (the COPY and the commit); the
driver releases the GIL while it waits, so a reader thread can parse the next chunk meanwhile.
One chunk is read ahead, no more, so memory stays at two chunks.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Iterator
from typing import TypeVar

T = TypeVar("T")
_DONE = object()


class _Failed:
    def __init__(self, error: BaseException) -> None:
        self.error = error


def read_ahead(source: Iterator[T]) -> Iterator[T]:
    """The items of ``source``, produced by a thread one item ahead of the consumer.

    An exception of ``source`` is raised in the consumer at the item where it happened; a
    consumer that stops early (or fails) stops the thread at its next item.
    """
    handoff: queue.Queue[object] = queue.Queue(maxsize=1)
    stop = threading.Event()

    def produce() -> None:
        try:
            for item in source:
                if not _put(handoff, item, stop):
                    return
            _put(handoff, _DONE, stop)
        except BaseException as exc:  # handed to the consumer, which raises it
            _put(handoff, _Failed(exc), stop)

    thread = threading.Thread(target=produce, name="calibrant-read-ahead", daemon=True)
    thread.start()
    try:
        while True:
            item = handoff.get()
            if item is _DONE:
                return
            if isinstance(item, _Failed):
                raise item.error
            yield item  # type: ignore[misc]  # anything else is an item of source
    finally:
        stop.set()
        thread.join()


def _put(handoff: queue.Queue[object], item: object, stop: threading.Event) -> bool:
    """Put unless the consumer stopped; False when it did."""
    while not stop.is_set():
        try:
            handoff.put(item, timeout=0.1)
            return True
        except queue.Full:
            continue
    return False
