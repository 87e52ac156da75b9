"""Model page server time: a year of weekly data with 20 segments.

    python -m tests.bench.pages                 # 52 weeks, 20 segment values, SQLite and PostgreSQL
    python -m tests.bench.pages --small         # the CI-sized run (tests/bench/test_pages_bench_small.py)

Loads a model through the API (predictions in two hours of each day, so the refresh stays
short; the page reads daily summaries whatever the hours), refreshes, then asks for
``/models/<model>`` (52 weekly periods, the segment and version tables, the reliability
diagram, the series of each segment in alarm) and ``/`` several times. Prints the server's
own time of each page (its Server-Timing header) as p50/p95, the wall time of the request, and
the process CPU time the request took (on a shared machine the wall time grows with the other
work on it; the CPU time barely does). The goal: the model page under 1 s.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
import uuid
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import sqlalchemy as sa
from fastapi.testclient import TestClient

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.store import migrate
from calibrant.store.engine import make_engine

MODEL = "bench-pages"
SEGMENT_KEY = "shop"
START = datetime(2025, 1, 6, tzinfo=UTC)  # a Monday
BATCH = 10_000
DEFAULT_PG_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"


@dataclass(frozen=True)
class Load:
    ids: list[str]
    p: np.ndarray
    y: np.ndarray
    segment: list[str]
    scored_at: list[datetime]


def generate(weeks: int, segments: int, per_day: int, seed: int = 7) -> Load:
    rng = np.random.default_rng(seed)
    n_days = weeks * 7
    n = n_days * per_day
    day = np.repeat(np.arange(n_days), per_day)
    seconds = rng.integers(0, 2 * 3600, n)  # two hours of each day
    p = rng.beta(2, 8, n)
    y = (rng.random(n) < p).astype(int)
    segment = [f"s{v:02d}" for v in rng.integers(0, segments, n)]
    scored = [START + timedelta(days=int(d), seconds=int(s)) for d, s in zip(day, seconds, strict=True)]
    return Load([f"c{i}" for i in range(n)], p, y, segment, scored)


def _iso(t: datetime) -> str:
    return t.isoformat().replace("+00:00", "Z")


def load(client: TestClient, data: Load) -> None:
    body = {"outcome_horizon_days": 1, "segment_keys": [SEGMENT_KEY]}
    assert client.put(f"/v1/models/{MODEL}", json=body).status_code in (200, 201)
    for lo in range(0, len(data.ids), BATCH):
        chunk = range(lo, min(lo + BATCH, len(data.ids)))
        preds = [{"id": data.ids[i], "probability": float(data.p[i]), "scored_at": _iso(data.scored_at[i]),
                  "tags": {SEGMENT_KEY: data.segment[i]}} for i in chunk]
        r = client.post(f"/v1/models/{MODEL}/predictions", json={"predictions": preds})
        assert r.status_code == 200, r.text
        outs = [{"id": data.ids[i], "label": int(data.y[i]),
                 "observed_at": _iso(data.scored_at[i] + timedelta(hours=3))} for i in chunk]
        r = client.post(f"/v1/models/{MODEL}/outcomes", json={"outcomes": outs})
        assert r.status_code == 200, r.text


def _server_ms(response: Any) -> float:
    timing = response.headers["server-timing"]  # "page;dur=123.4"
    return float(timing.split("dur=")[1])


def _quantiles(values: list[float]) -> tuple[float, float]:
    ordered = sorted(values)
    return statistics.median(ordered), ordered[min(len(ordered) - 1, round(0.95 * (len(ordered) - 1)))]


def run(url: str, *, weeks: int, segments: int, per_day: int, repeats: int) -> dict[str, Any]:
    engine = make_engine(Settings(database_url=url))
    migrate.upgrade(engine)
    data = generate(weeks, segments, per_day)
    now = START + timedelta(weeks=weeks, days=3)
    clock = FixedClock(START)
    result: dict[str, Any] = {"rows": len(data.ids), "weeks": weeks, "segments": segments}
    try:
        # The year is posted at once while the clock still reads its start, so scores up to a
        # year ahead of the clock are admitted (the default tolerance is one day).
        settings = Settings(database_url=url, future_tolerance_hours=24 * 7 * (weeks + 1))
        with TestClient(create_app(settings, engine=engine, clock=clock)) as client:
            t = time.perf_counter()
            load(client, data)
            clock.set(now)
            result["load_s"] = time.perf_counter() - t
            t = time.perf_counter()
            assert client.post("/v1/refresh?wait=true").status_code == 200
            result["refresh_s"] = time.perf_counter() - t
            for name, path in (("model_page", f"/models/{MODEL}"), ("overview", "/")):
                server, wall, cpu = [], [], []
                for _ in range(repeats):
                    t, c = time.perf_counter(), time.process_time()
                    response = client.get(path)
                    wall.append((time.perf_counter() - t) * 1000)
                    cpu.append((time.process_time() - c) * 1000)
                    assert response.status_code == 200, response.text[:500]
                    server.append(_server_ms(response))
                result[f"{name}_server_ms"] = _quantiles(server)
                result[f"{name}_wall_ms"] = _quantiles(wall)
                result[f"{name}_cpu_ms"] = _quantiles(cpu)
                result[f"{name}_html"] = response.text
    finally:
        engine.dispose()
    result["data"] = data
    result["now"] = now
    return result


def report(dialect: str, result: dict[str, Any]) -> None:
    print(f"{dialect}: {result['rows']:,} cases over {result['weeks']} weeks, "
          f"{result['segments']} segment values; load {result['load_s']:.1f} s, "
          f"refresh {result['refresh_s']:.1f} s", flush=True)
    for name in ("model_page", "overview"):
        s50, s95 = result[f"{name}_server_ms"]
        w50, w95 = result[f"{name}_wall_ms"]
        c50, c95 = result[f"{name}_cpu_ms"]
        print(f"  {name:>10}: server p50 {s50:7.1f} ms  p95 {s95:7.1f} ms | request wall p50 {w50:7.1f} ms  "
              f"p95 {w95:7.1f} ms | CPU p50 {c50:7.1f} ms  p95 {c95:7.1f} ms", flush=True)
    print(f"  load average (1 min) at the end: {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs", flush=True)


def _postgres_url() -> tuple[str, sa.Engine, str]:
    base = os.environ.get("CALIBRANT_TEST_POSTGRES_URL", DEFAULT_PG_URL)
    schema = f"calibrant_bench_pages_{uuid.uuid4().hex[:8]}"
    admin = sa.create_engine(base)
    with admin.begin() as conn:
        conn.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
    sep = "&" if "?" in base else "?"
    return f"{base}{sep}options=-csearch_path%3D{schema}", admin, schema


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--small", action="store_true")
    parser.add_argument("--sqlite-only", action="store_true")
    args = parser.parse_args()
    size = ({"weeks": 4, "segments": 3, "per_day": 60, "repeats": 3} if args.small
            else {"weeks": 52, "segments": 20, "per_day": 240, "repeats": 7})
    with tempfile.TemporaryDirectory() as scratch:
        report("sqlite", run(f"sqlite:///{scratch}/pages.db", **size))
    if args.sqlite_only:
        return
    url, admin, schema = _postgres_url()
    try:
        report("postgresql", run(url, **size))
    finally:
        with admin.begin() as conn:
            conn.exec_driver_sql(f'DROP SCHEMA "{schema}" CASCADE')
        admin.dispose()


if __name__ == "__main__":
    main()
