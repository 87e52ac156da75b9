"""SIGKILL the server while large batches are in flight, restart it, check what survived.

A 2xx promises the batch is committed, and a batch is all or nothing. Each
batch uses its own id range, so after the restart every batch must be either
fully present or fully absent, and every batch that was answered 2xx present.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

import httpx
import orjson

from tests.conftest import Database
from tests.system.server import ServerProcess

BATCHES = 6  # concurrent requests per round; at least four must be in flight at the kill
MIN_IN_FLIGHT = 4
ITEMS = 10_000
ROUNDS = 3  # a round where every request finished before the kill proves nothing: retry
MODEL = "durable"
WAIT_DEADLINE_S = 60.0


@dataclass
class Attempt:
    """One request and what became of it."""

    name: str
    body: bytes
    body_sent: threading.Event = field(default_factory=threading.Event)
    status: int | None = None  # None: no response (cut off by the kill)
    error: str = ""


def batch_body(name: str) -> bytes:
    items = [
        {
            "id": f"{name}-{i:05d}",
            "probability": (i % 1000) / 1000,
            "scored_at": "2026-03-01T12:00:00Z",
            "tags": {"batch": name},
        }
        for i in range(ITEMS)
    ]
    return orjson.dumps({"predictions": items})


def post(base_url: str, attempt: Attempt, answered: threading.Event) -> None:
    def trace(event: str, _info: dict) -> None:
        if event == "http11.send_request_body.complete":
            attempt.body_sent.set()

    try:
        with httpx.Client(base_url=base_url, timeout=WAIT_DEADLINE_S) as client:
            response = client.post(
                f"/v1/models/{MODEL}/predictions",
                content=attempt.body,
                headers={"content-type": "application/json"},
                extensions={"trace": trace},
            )
        attempt.status = response.status_code
    except httpx.TransportError as exc:
        attempt.error = type(exc).__name__
    finally:
        answered.set()


def wait_until(condition, deadline_s: float) -> bool:
    """Poll ``condition`` until it holds or the deadline passes (threads report via Events)."""
    deadline = time.monotonic() + deadline_s
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.002)
    return condition()


def kill_during_batches(server: ServerProcess, round_no: int) -> list[Attempt]:
    """Post BATCHES batches at once; SIGKILL the server as soon as one is answered."""
    attempts = [Attempt(f"r{round_no}b{k}", batch_body(f"r{round_no}b{k}")) for k in range(BATCHES)]
    answered = threading.Event()
    threads = [
        threading.Thread(target=post, args=(server.base_url, a, answered), daemon=True)
        for a in attempts
    ]
    for thread in threads:
        thread.start()
    # The first answer shows the server is committing batches; the others whose bodies
    # are fully sent are then in flight. Kill at that moment, not after a guessed delay.
    sent_enough = wait_until(
        lambda: answered.is_set() and sum(a.body_sent.is_set() for a in attempts) >= MIN_IN_FLIGHT,
        WAIT_DEADLINE_S,
    )
    server.kill()
    for thread in threads:
        thread.join(timeout=WAIT_DEADLINE_S)
        assert not thread.is_alive(), "a client did not notice the server had died"
    assert sent_enough, "fewer than four request bodies were sent before the deadline"
    return attempts


def stored_per_batch(db: Database) -> dict[str, int]:
    with db.engine.connect() as conn:
        ids = conn.exec_driver_sql("SELECT case_id FROM predictions").scalars().all()
    counts: dict[str, int] = {}
    for case_id in ids:
        batch = case_id.rsplit("-", 1)[0]
        counts[batch] = counts.get(batch, 0) + 1
    return counts


def test_sigkill_keeps_answered_batches_and_never_half_a_batch(db: Database, tmp_path: Path):
    server = ServerProcess(db.url, tmp_path / "server.log", {"CALIBRANT_LOG_LEVEL": "warning"})
    attempts: list[Attempt] = []
    try:
        for round_no in range(ROUNDS):
            server.start()
            this_round = kill_during_batches(server, round_no)
            attempts.extend(this_round)
            if any(a.status is None for a in this_round):
                break
        unexpected = [(a.name, a.status) for a in attempts if a.status not in (None, 200)]
        assert not unexpected, f"answers other than 200 before the kill: {unexpected}"
        cut_off = [a for a in attempts if a.status is None]
        assert cut_off, f"no request was cut off by SIGKILL in {ROUNDS} rounds"

        server.start()  # the restart must recover the database the kill left behind
        per_batch = stored_per_batch(db)
        for a in attempts:
            stored = per_batch.get(a.name, 0)
            assert stored in (0, ITEMS), f"batch {a.name} is half-written: {stored} of {ITEMS} rows"
            if a.status == 200:
                assert stored == ITEMS, f"batch {a.name} was answered 200 but is not stored"

        # A client's retry of a cut-off batch completes it, whether or not it had committed.
        with httpx.Client(base_url=server.base_url, timeout=WAIT_DEADLINE_S) as client:
            for a in cut_off:
                reply = client.post(
                    f"/v1/models/{MODEL}/predictions",
                    content=a.body,
                    headers={"content-type": "application/json"},
                )
                assert reply.status_code == 200, reply.text
                already = per_batch.get(a.name, 0)
                assert reply.json() == {"accepted": ITEMS - already, "duplicates": already,
                                        "expired": 0}
            counts = client.get(f"/v1/models/{MODEL}").json()["counts"]
        assert counts["predictions"] == ITEMS * len(attempts)
    finally:
        server.stop()
