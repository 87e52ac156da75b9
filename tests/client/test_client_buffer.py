"""BatchingSender: flush on size, on time (injected clock, and the real thread), on close; thread safety."""

from __future__ import annotations

import json
import threading
import time
from datetime import UTC, datetime

import httpx
import pytest

from calibrant_client import BatchingSender, Client

T = datetime(2026, 11, 2, tzinfo=UTC)


class Recorder:
    def __init__(self) -> None:
        self.batches: list[tuple[str, list[str]]] = []
        self.lock = threading.Lock()

    def __call__(self, request: httpx.Request) -> httpx.Response:
        kind = request.url.path.rsplit("/", 1)[1]
        ids = [item["id"] for item in json.loads(request.content)[kind]]
        with self.lock:
            self.batches.append((kind, ids))
        return httpx.Response(200, json={"accepted": len(ids), "duplicates": 0})

    def ids(self) -> list[str]:
        with self.lock:
            return [i for _, ids in self.batches for i in ids]


def client(recorder: Recorder) -> Client:
    return Client("http://calibrant.test", transport=httpx.MockTransport(recorder), sleep=lambda _s: None)


def item(i: int) -> dict:
    return {"id": f"c{i}", "probability": 0.3, "scored_at": T}


def test_size_and_time_flushes_with_an_injected_clock() -> None:
    rec = Recorder()
    now = [100.0]
    buffer = BatchingSender(client(rec), "m", max_items=3, max_seconds=10, clock=lambda: now[0],
                            background=False)
    for i in range(3):
        buffer.add_prediction(item(i))
    assert rec.batches == [("predictions", ["c0", "c1", "c2"])]  # full: sent at once
    buffer.add_prediction(item(3))
    now[0] += 9.9
    assert buffer.flush_if_due() is False
    now[0] += 0.1
    assert buffer.flush_if_due() is True
    assert rec.batches[-1] == ("predictions", ["c3"])
    assert buffer.pending == 0
    buffer.close()


def test_background_thread_flushes_by_time() -> None:
    rec = Recorder()
    with BatchingSender(client(rec), "m", max_items=1000, max_seconds=0.2) as buffer:
        buffer.add_prediction(item(1))
        deadline = time.monotonic() + 10
        while not rec.batches and time.monotonic() < deadline:
            time.sleep(0.01)
        assert rec.batches == [("predictions", ["c1"])]


def test_naive_time_is_refused_when_added() -> None:
    buffer = BatchingSender(client(Recorder()), "m", background=False)
    with pytest.raises(ValueError, match="naive"):
        buffer.add_prediction({"id": "a", "probability": 0.1, "scored_at": datetime(2026, 1, 1)})
    assert buffer.pending == 0
    buffer.close()


def test_many_threads_lose_and_repeat_nothing() -> None:
    rec = Recorder()
    buffer = BatchingSender(client(rec), "m", max_items=50, max_seconds=0.05)

    def work(t: int) -> None:
        for i in range(500):
            buffer.add_prediction(item(t * 1000 + i))

    threads = [threading.Thread(target=work, args=(t,)) for t in range(8)]
    for th in threads:
        th.start()
    for th in threads:
        th.join(timeout=30)
    buffer.close()
    ids = rec.ids()
    assert len(ids) == 4000
    assert len(set(ids)) == 4000
    with pytest.raises(RuntimeError, match="closed"):
        buffer.add_prediction(item(0))
