"""Query benchmark on PostgreSQL: full and incremental refresh, and the 52-week metrics query.

    python tests/bench/query.py            # 1M and 10M rows (the issue's goal: query(10M) <= 1.2 x query(1M))
    python tests/bench/query.py --small    # the CI-sized run (tests/bench/test_query_bench_small.py)

Works in a scratch schema of CALIBRANT_TEST_POSTGRES_URL (default: the local
test server), migrated to head and dropped at the end.
"""

from __future__ import annotations

import argparse
import os
import random
import statistics
import sys
import time
import uuid
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from sqlalchemy.orm import Session

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
from tests.bench.query_load import VERSION, YEAR_START, load_year

from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.rollup import metrics_service
from calibrant.rollup.refresh import refresh_dirty
from calibrant.store import dirty, migrate
from calibrant.store.dirty import BucketKey
from calibrant.store.engine import make_engine

DEFAULT_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"
MODEL = "bench-year"
NOW = YEAR_START + timedelta(days=400)
YEAR_END = YEAR_START + timedelta(weeks=52)
QUERY_REPEATS = 30


def create_model(engine: sa.Engine) -> int:
    with engine.begin() as conn:
        return int(conn.execute(sa.text(
            "INSERT INTO models (name, description, outcome_lag_days, implicit_negatives, segment_keys, "
            "settings_generation, created_at, updated_at) "
            "VALUES (:n, '', 0, false, '[]', 1, :t, :t) RETURNING id"), {"n": MODEL, "t": NOW}).scalar())


def year_query(engine: sa.Engine, **params: Any) -> dict:
    with Session(engine) as session:
        return metrics_service.metrics(
            session, MODEL, start=YEAR_START.isoformat(), end=YEAR_END.isoformat(), granularity="week",
            window=None, version=None, tag=[], now=NOW, **params)


def hours_only_query(engine: sa.Engine, repeats: int) -> float:
    """p50 of the same query with every day marked dirty, so it reads hours only (the tier's gain)."""
    with engine.begin() as conn:
        conn.exec_driver_sql(
            "INSERT INTO dirty_days (model_id, version, day, generation, marked_at) "
            "SELECT DISTINCT model_id, version, day, 1, now() FROM day_summaries")
    try:
        times = []
        for _ in range(repeats):
            t = time.perf_counter()
            year_query(engine)
            times.append(time.perf_counter() - t)
        return statistics.median(times)
    finally:
        with engine.begin() as conn:
            conn.exec_driver_sql("DELETE FROM dirty_days")


def run(url: str, n_rows: int, hours_per_day: int = 24, repeats: int = QUERY_REPEATS) -> dict[str, Any]:
    """Load, refresh fully, refresh 1 % of buckets, time the 52-week query, in the schema of ``url``."""
    engine = make_engine(Settings(database_url=url))
    clock = FixedClock(NOW)
    try:
        model_id = create_model(engine)
        t = time.perf_counter()
        n_buckets = load_year(engine, model_id, n_rows, hours_per_day)
        load_s = time.perf_counter() - t

        t = time.perf_counter()
        full = refresh_dirty(engine, clock, worker="bench-full")
        full_s = time.perf_counter() - t
        assert full.rows_read == n_rows
        assert full.buckets == n_buckets

        rng = random.Random(1)
        with engine.connect() as conn:
            hours = conn.execute(sa.text("SELECT DISTINCT hour FROM bucket_summaries")).scalars().all()
        chosen = rng.sample(sorted(hours), max(1, len(hours) // 100))
        with engine.begin() as conn:
            dirty.mark(conn, (BucketKey(model_id, VERSION, h) for h in chosen), NOW)
        t = time.perf_counter()
        incremental = refresh_dirty(engine, clock, worker="bench-incremental")
        incr_s = time.perf_counter() - t

        delay_s = _measure_delay(engine, clock)
        year_query(engine)  # warm the cache once
        times = []
        for _ in range(repeats):
            t = time.perf_counter()
            body = year_query(engine)
            times.append(time.perf_counter() - t)
        times.sort()
        hours_only = hours_only_query(engine, max(3, repeats // 5))
        with engine.connect() as conn:
            year = conn.execute(sa.text(
                "SELECT count(*), avg(label) FROM outcomes WHERE model_id = :m"), {"m": model_id}).one()
        return {
            "rows": n_rows,
            "buckets": n_buckets,
            "load_s": load_s,
            "full_refresh_s": full_s,
            "full_refresh_rows_per_s": n_rows / full_s,
            "incremental_buckets": incremental.buckets,
            "incremental_rows": incremental.rows_read,
            "incremental_s": incr_s,
            "incremental_rows_per_s": incremental.rows_read / incr_s,
            "query_p50_s": statistics.median(times),
            "query_p95_s": times[min(len(times) - 1, round(0.95 * (len(times) - 1)))],
            "hours_only_p50_s": hours_only,
            "delay_measure_s": delay_s,
            "full_refresh_days": len(full.merged_days),
            "incremental_days": len(incremental.merged_days),
            "periods": body["periods"],
            "labeled_rows": int(year[0]),
        }
    finally:
        engine.dispose()


def _measure_delay(engine: sa.Engine, clock: FixedClock) -> float:
    """Measure and keep the model's outcome delay, as the alarms job does, so the timed query
    computes every period's label completeness from it (returns the seconds the measure took;
    0 on code without the measure)."""
    try:
        from calibrant.rollup import outcome_delay
        from calibrant.store.tables import Model
    except ImportError:
        return 0.0
    t = time.perf_counter()
    with Session(engine) as session:
        model = session.scalars(sa.select(Model).where(Model.name == MODEL)).one()
        outcome_delay.refresh(session.connection(), model, clock.now())
        session.commit()
    return time.perf_counter() - t


def scratch_schema(base: str) -> tuple[str, sa.Engine, str]:
    schema = f"calibrant_bench_q_{uuid.uuid4().hex[:8]}"
    admin = sa.create_engine(base)
    with admin.begin() as conn:
        conn.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
    sep = "&" if "?" in base else "?"
    url = f"{base}{sep}options=-csearch_path%3D{schema}"
    engine = make_engine(Settings(database_url=url))
    migrate.upgrade(engine)
    engine.dispose()
    return url, admin, schema


def format_row(r: dict[str, Any]) -> str:
    return (f"{r['rows']:>11,} rows {r['buckets']:>6,} buckets | load {r['load_s']:7.1f} s | "
            f"full refresh {r['full_refresh_s']:7.1f} s = {r['full_refresh_rows_per_s']:>9,.0f} rows/s, "
            f"{r['full_refresh_days']} days merged | "
            f"1% incremental {r['incremental_buckets']} buckets + {r['incremental_days']} days, "
            f"{r['incremental_rows']:,} rows in "
            f"{r['incremental_s']:.2f} s = {r['incremental_rows_per_s']:>9,.0f} rows/s | "
            f"52-week query p50 {1000 * r['query_p50_s']:.0f} ms p95 {1000 * r['query_p95_s']:.0f} ms "
            f"(hours only: p50 {1000 * r['hours_only_p50_s']:.0f} ms) | "
            f"delay measured in {r.get('delay_measure_s', 0.0):.2f} s")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help="20,000 rows, 2 scoring hours a day")
    parser.add_argument("--sizes", default="1000000,10000000", help="comma-separated row counts")
    args = parser.parse_args()
    base = os.environ.get("CALIBRANT_TEST_POSTGRES_URL", DEFAULT_URL)
    sizes = [20_000] if args.small else [int(s) for s in args.sizes.split(",")]
    hours = 2 if args.small else 24
    results = []
    for n in sizes:
        url, admin, schema = scratch_schema(base)
        try:
            results.append(run(url, n, hours))
            print(format_row(results[-1]), flush=True)
        finally:
            with admin.begin() as conn:
                conn.exec_driver_sql(f'DROP SCHEMA "{schema}" CASCADE')
            admin.dispose()
    if len(results) > 1:
        ratio = results[-1]["query_p50_s"] / results[0]["query_p50_s"]
        print(f"query p50 ratio {results[-1]['rows']:,} / {results[0]['rows']:,} rows: {ratio:.2f} "
              "(goal <= 1.2)")
    print(f"at {datetime.now(UTC):%Y-%m-%d %H:%M} UTC, {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
