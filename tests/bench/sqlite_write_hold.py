"""How long the refresh holds SQLite's write lock: the longest write transaction of a refresh.

    .venv/bin/python -m tests.bench.sqlite_write_hold [--hours N] [--rows N] [--segments N]

A model with ``--hours`` hour buckets of ``--rows`` predictions each, tagged with two segment
keys (``--segments`` values each), refreshed once by ``rollup.refresh.refresh_dirty`` with its
defaults (25 buckets a group). Each transaction is timed from its BEGIN (for a write, the moment
the write lock is taken: ``BEGIN IMMEDIATE`` returns holding it) to its COMMIT or ROLLBACK.
Printed: write transactions (they hold the lock; reads wait for none of it since reads begin
deferred), and read transactions (the recompute's reading and summing, which before this change
also held the write lock). The figure to state is the longest write transaction.
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import threading
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient
from sqlalchemy import event
from tests.bench.scratch_schema import migrated_sqlite

from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.rollup.refresh import refresh_dirty
from calibrant.store.engine import READ_OPTION, make_engine

NOW = datetime(2026, 6, 1, tzinfo=UTC)
BATCH = 10_000


@dataclass
class Held:
    writes_ms: list[float] = field(default_factory=list)
    reads_ms: list[float] = field(default_factory=list)
    refresh_s: float = 0.0
    buckets: int = 0


def _timed(engine: Any, held: Held) -> None:
    opened: dict[int, tuple[float, bool]] = {}
    lock = threading.Lock()

    @event.listens_for(engine, "begin")  # after the engine's own listener has sent BEGIN
    def _begun(conn: Any) -> None:
        with lock:
            opened[id(conn)] = (time.perf_counter(), bool(conn.get_execution_options().get(READ_OPTION)))

    def _ended(conn: Any) -> None:
        with lock:
            started = opened.pop(id(conn), None)
        if started is not None:
            ms = (time.perf_counter() - started[0]) * 1000
            (held.reads_ms if started[1] else held.writes_ms).append(ms)

    event.listen(engine, "commit", _ended)
    event.listen(engine, "rollback", _ended)


def measure(workdir: Path, hours: int, rows: int, segments: int) -> Held:
    url = migrated_sqlite(workdir / "hold.db")
    settings = Settings(database_url=url, sqlite_synchronous="NORMAL", future_tolerance_hours=24 * 3660)
    engine = make_engine(settings)
    clock = FixedClock(NOW)
    start = NOW - timedelta(hours=hours + 48)
    items = [{"id": f"c{h}-{i}", "probability": 0.02 + 0.96 * ((h * 7919 + i * 104_729) % 1000) / 1000,
              "scored_at": (start + timedelta(hours=h, seconds=i % 3600)).isoformat(),
              "tags": {"region": f"r{i % segments}", "channel": f"c{(i // segments) % segments}"}}
             for h in range(hours) for i in range(rows)]
    with TestClient(create_app(settings, engine=engine, clock=clock)) as client:
        for offset in range(0, len(items), BATCH):
            batch = {"predictions": items[offset:offset + BATCH]}
            r = client.post("/v1/models/bench/predictions", json=batch)
            assert r.status_code == 200, r.text
    held = Held()
    _timed(engine, held)
    t = time.perf_counter()
    report = refresh_dirty(engine, clock, worker="bench")
    held.refresh_s = time.perf_counter() - t
    held.buckets = report.buckets
    engine.dispose()
    return held


def _line(name: str, values: list[float]) -> str:
    ordered = sorted(values)
    p95 = ordered[min(len(ordered) - 1, int(0.95 * len(ordered)))]
    return (f"  {name:<20} {len(values):>5} transactions; median {statistics.median(values):7.1f} ms, "
            f"p95 {p95:7.1f} ms, longest {ordered[-1]:7.1f} ms")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--hours", type=int, default=500)
    parser.add_argument("--rows", type=int, default=200)
    parser.add_argument("--segments", type=int, default=5)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        held = measure(Path(tmp), args.hours, args.rows, args.segments)
    print(f"refresh of {held.buckets} hour buckets × {args.rows} rows "
          f"(2 segment keys × {args.segments} values) in {held.refresh_s:.1f} s")
    print(_line("write (lock held)", held.writes_ms))
    print(_line("read (no lock)", held.reads_ms))
    print(f"  load average (1 min) at the end: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs", flush=True)


if __name__ == "__main__":
    main()
