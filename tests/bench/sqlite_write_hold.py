"""How long a refresh job holds SQLite's write lock: the longest write transaction of each phase.

    .venv/bin/python -m tests.bench.sqlite_write_hold [--hours N] [--rows N] [--segments N]

A model with ``--hours`` hour buckets of ``--rows`` predictions each (every one labelled), tagged
with two segment keys (``--segments`` values each), then every job run once to the end
(``jobs.run_all``, as a refresh job runs it): the rollup's refresh with its defaults (set-based, at
most ``refresh.WRITE_BUCKETS`` buckets a write transaction), the alarm job, webhook delivery. Each
transaction is timed from its BEGIN (for a write, the moment the write lock is taken: ``BEGIN
IMMEDIATE`` returns holding it) to its COMMIT or ROLLBACK, and filed under the phase that ran it.
Printed per phase: write transactions (they hold the lock; reads wait for none of it since reads
begin deferred), and read transactions (the recompute's reading and summing, which before this
change also held the write lock). The figure to state is the longest write transaction of the
refresh phase.
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

from calibrant import jobs
from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.notify.senders import LoggingSender
from calibrant.store.engine import READ_OPTION, make_engine

NOW = datetime(2026, 6, 1, tzinfo=UTC)
BATCH = 10_000


@dataclass
class Held:
    """Transaction times by phase (refresh, alarms, deliver_webhooks) and kind (write, read)."""

    ms: dict[tuple[str, str], list[float]] = field(default_factory=dict)
    seconds: float = 0.0
    buckets: int = 0
    cases: int = 0
    phase: str = "starting"

    @property
    def writes_ms(self) -> list[float]:
        return self.ms.get(("refresh", "write"), [])

    @property
    def reads_ms(self) -> list[float]:
        return self.ms.get(("refresh", "read"), [])


class _Phases:
    """A ``jobs.JobProgress`` that files the transactions of each phase under its name."""

    def __init__(self, held: Held) -> None:
        self.held = held

    def phase(self, job: str, _round: int) -> None:
        self.held.phase = job

    def buckets_done(self, keys: list) -> None:
        pass


def _timed(engine: Any, held: Held) -> None:
    opened: dict[int, tuple[float, str]] = {}
    lock = threading.Lock()

    @event.listens_for(engine, "begin")  # after the engine's own listener has sent BEGIN
    def _begun(conn: Any) -> None:
        kind = "read" if conn.get_execution_options().get(READ_OPTION) else "write"
        with lock:
            opened[id(conn)] = (time.perf_counter(), kind)

    def _ended(conn: Any) -> None:
        with lock:
            started = opened.pop(id(conn), None)
        if started is not None:
            ms = (time.perf_counter() - started[0]) * 1000
            held.ms.setdefault((held.phase, started[1]), []).append(ms)

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
    labels = [{"id": item["id"], "label": int(item["probability"] > 0.5),
               "observed_at": (datetime.fromisoformat(item["scored_at"]) + timedelta(hours=2)).isoformat()}
              for item in items]
    with TestClient(create_app(settings, engine=engine, clock=clock)) as client:
        # A horizon, so every case is mature at NOW and the alarm phase reads them all.
        r = client.put("/v1/models/bench", json={"outcome_horizon_days": 1, "outcome_lag_days": 0})
        assert r.status_code in (200, 201), r.text
        for kind, rows_ in (("predictions", items), ("outcomes", labels)):
            for offset in range(0, len(rows_), BATCH):
                r = client.post(f"/v1/models/bench/{kind}", json={kind: rows_[offset:offset + BATCH]})
                assert r.status_code == 200, r.text
    held = Held()
    _timed(engine, held)
    t = time.perf_counter()
    report = jobs.run_all(jobs.JobContext(engine, clock, settings, LoggingSender(), progress=_Phases(held)))
    held.seconds = time.perf_counter() - t
    held.buckets = report["jobs"]["refresh"]["buckets"]
    held.cases = report["jobs"]["alarms"]["cases"]
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
    print(f"every job to the end in {held.seconds:.1f} s: {held.buckets} hour buckets × {args.rows} rows "
          f"(2 segment keys × {args.segments} values) refreshed, {held.cases} chart cases")
    for (phase, kind), values in sorted(held.ms.items()):
        print(_line(f"{phase} {kind}", values))
    print(f"  load average (1 min) at the end: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs", flush=True)


if __name__ == "__main__":
    main()
