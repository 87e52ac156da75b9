"""Refresh benchmark: the set-based full refresh against reading the same joined rows into numpy.

    python -m tests.bench.refresh                                 # 1M on PostgreSQL and on SQLite
    python -m tests.bench.refresh --postgres 1000000,10000000 --sqlite 1000000
    python -m tests.bench.refresh --small                         # the CI-sized run

Each size runs in a database of its own (a scratch PostgreSQL schema, a SQLite
file): a year (364 days, 24 scoring hours a day) of predictions of two versions
tagged with two declared segment keys ("region": 4 values, "channel": 3), 85 %
with an outcome. In the same run and database it times:

* the read: the joined rows (probability, counted label, scored_at, version,
  tags) into numpy in one statement. PostgreSQL: binary ``COPY ... TO STDOUT``
  of fixed-width columns parsed with ``np.frombuffer`` (tags as indexes into
  their distinct strings, read first), the fastest read written here; SQLite: one
  query fetched into arrays;
* the full refresh (every bucket dirty), its rows/s, its ratio to the read's
  rows/s, and the peak resident memory it added (sampled every 20 ms);
* incremental refreshes with 1 % and 10 % of the buckets marked dirty.

The figures carry the load average: the machine may be shared, and the ratio
within one run is what compares.
"""

from __future__ import annotations

import argparse
import os
import random
import sys
import tempfile
import threading
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import sqlalchemy as sa

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
from tests.bench.scratch_schema import migrated_postgres_schema, migrated_sqlite

from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.rollup.refresh import refresh_dirty
from calibrant.store import dirty
from calibrant.store.dirty import BucketKey
from calibrant.store.engine import make_engine

DEFAULT_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"
YEAR_START = datetime(2025, 1, 6, tzinfo=UTC)
NOW = YEAR_START + timedelta(days=400)
MODEL = "bench-refresh"
SEGMENT_KEYS = '["channel", "region"]'
VERSIONS = ("v1", "v2")

_PG_PREDICTIONS = """
INSERT INTO predictions (model_id, case_id, version, probability, scored_at, tags, received_at)
SELECT :model_id, 'c' || lpad(g::text, 9, '0'), CASE WHEN g % 2 = 0 THEN 'v1' ELSE 'v2' END,
       1.0 / (1.0 + exp(-(-0.8 + 1.1 * sqrt(-2.0 * ln(1.0 - random())) * cos(2.0 * pi() * random())))),
       :t0 + floor(random() * CAST(:days AS int) * 24 * 3600) * interval '1 second',
       '{"channel":"c' || (g % 3) || '","region":"r' || ((g / 3) % 4) || '"}', now()
FROM generate_series(1, CAST(:n AS bigint)) AS g
"""
_PG_OUTCOMES = """
INSERT INTO outcomes (model_id, case_id, label, observed_at, first_observed_at, received_at, revision)
SELECT model_id, case_id, CASE WHEN random() < probability THEN 1 ELSE 0 END,
       scored_at + interval '2 days', scored_at + interval '2 days', now(), 1
FROM predictions WHERE model_id = :model_id AND random() < 0.85
"""
_PG_MARK = """
INSERT INTO dirty_buckets (model_id, version, hour, generation, marked_at)
SELECT DISTINCT model_id, version,
       date_trunc('hour', scored_at AT TIME ZONE 'UTC') AT TIME ZONE 'UTC', 1, now()
FROM predictions WHERE model_id = :model_id
"""


class PeakRss:
    """Peak resident memory of this process above its level at start, sampled every 20 ms."""

    def __init__(self) -> None:
        self.start = self.peak = _rss()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)

    def __enter__(self) -> PeakRss:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()
        self.peak = max(self.peak, _rss())

    def _sample(self) -> None:
        while not self._stop.wait(0.02):
            self.peak = max(self.peak, _rss())

    @property
    def added_mib(self) -> float:
        return (self.peak - self.start) / 2**20


def _rss() -> int:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


def create_model(engine: sa.Engine) -> int:
    with engine.begin() as conn:
        return int(conn.execute(sa.text(
            "INSERT INTO models (name, description, outcome_lag_days, implicit_negatives, segment_keys, "
            "settings_generation, created_at, updated_at) "
            "VALUES (:n, '', 0, false, :k, 1, :t, :t) RETURNING id"),
            {"n": MODEL, "k": SEGMENT_KEYS, "t": NOW}).scalar())


def load_postgres(engine: sa.Engine, model_id: int, n_rows: int, days: int) -> None:
    with engine.begin() as conn:
        conn.exec_driver_sql("SELECT setseed(0.23)")
        params = {"model_id": model_id, "n": n_rows, "t0": YEAR_START, "days": days}
        conn.execute(sa.text(_PG_PREDICTIONS), params)
        conn.execute(sa.text(_PG_OUTCOMES), params)
        conn.execute(sa.text(_PG_MARK), params)
    with engine.begin() as conn:
        conn.exec_driver_sql("ANALYZE predictions")
        conn.exec_driver_sql("ANALYZE outcomes")


def load_sqlite(engine: sa.Engine, model_id: int, n_rows: int, days: int) -> None:
    """The same distributions as the PostgreSQL loader, generated with numpy."""
    rng = np.random.default_rng(23)
    g = np.arange(1, n_rows + 1)
    p = 1.0 / (1.0 + np.exp(-rng.normal(-0.8, 1.1, n_rows)))
    seconds = rng.integers(0, days * 24 * 3600, n_rows)
    labeled = rng.random(n_rows) < 0.85
    label = (rng.random(n_rows) < p).astype(int)
    start = YEAR_START.replace(tzinfo=None)
    fmt = "%Y-%m-%d %H:%M:%S.%f"
    scored = [(start + timedelta(seconds=int(s))).strftime(fmt) for s in seconds]
    observed = [(start + timedelta(seconds=int(s), days=2)).strftime(fmt) for s in seconds]
    now = NOW.replace(tzinfo=None).strftime(fmt)
    cases = [f"c{i:09d}" for i in g]
    predictions = [(model_id, cases[i], VERSIONS[int(g[i] % 2)], float(p[i]), scored[i],
                    f'{{"channel":"c{g[i] % 3}","region":"r{(g[i] // 3) % 4}"}}', now) for i in range(n_rows)]
    outcomes = [(model_id, cases[i], int(label[i]), observed[i], observed[i], now, 1)
                for i in np.flatnonzero(labeled)]
    raw = engine.raw_connection()
    try:
        cur = raw.cursor()
        cur.execute("BEGIN")
        cur.executemany("INSERT INTO predictions (model_id, case_id, version, probability, scored_at, tags, "
                        "received_at) VALUES (?, ?, ?, ?, ?, ?, ?)", predictions)
        cur.executemany("INSERT INTO outcomes (model_id, case_id, label, observed_at, first_observed_at, "
                        "received_at, revision) VALUES (?, ?, ?, ?, ?, ?, ?)", outcomes)
        cur.execute("COMMIT")
    finally:
        raw.close()
    hours = {(VERSIONS[int(g[i] % 2)], int(seconds[i]) // 3600) for i in range(n_rows)}
    with engine.begin() as conn:
        dirty.mark(conn, (BucketKey(model_id, v, YEAR_START + timedelta(hours=h)) for v, h in hours), NOW)


def read_postgres(engine: sa.Engine, model_id: int) -> int:
    """The joined rows into numpy arrays by binary COPY of fixed-width columns; returns the row count."""
    joined = ("FROM predictions LEFT JOIN outcomes ON outcomes.model_id = predictions.model_id "
              "AND outcomes.case_id = predictions.case_id")
    row = np.dtype([("n", ">i2"), ("l1", ">i4"), ("v", ">i2"), ("l2", ">i4"), ("t", ">i8"), ("l3", ">i4"),
                    ("p", ">f8"), ("l4", ">i4"), ("y", ">i2"), ("l5", ">i4"), ("tag", ">i4")])
    query = (
        "SELECT (predictions.version <> 'v1')::int::int2, "
        "(date_part('epoch', predictions.scored_at) * 1e6)::int8, "
        "predictions.probability, coalesce(outcomes.label, -1)::int2, (tag.code - 1)::int4 "
        f"{joined} JOIN unnest(%(tags)s::text[]) WITH ORDINALITY AS tag(text, code) "
        "ON tag.text = coalesce(predictions.tags, '') WHERE predictions.model_id = %(m)s"
    )
    n = 0
    with engine.connect().execution_options(isolation_level="REPEATABLE READ") as conn:
        tags = [t for (t,) in conn.exec_driver_sql(
            "SELECT DISTINCT coalesce(tags, '') FROM predictions WHERE model_id = %(m)s", {"m": model_id})]
        raw = conn.connection.driver_connection
        pending = bytearray()
        header = True
        with raw.cursor() as cur, cur.copy(f"COPY ({query}) TO STDOUT (FORMAT BINARY)",
                                           {"m": model_id, "tags": tags}) as copy:
            for block in copy:
                pending += block
                if header:
                    del pending[:19]
                    header = False
                if len(pending) >= 8 << 20:
                    n += _take(pending, row)
        del pending[-2:]  # the trailer
        n += _take(pending, row)
        conn.rollback()
    return n


def _take(pending: bytearray, row: np.dtype) -> int:
    """Parse the whole rows at the head of ``pending`` into arrays (and drop them: the bench keeps none)."""
    k = len(pending) // row.itemsize
    a = np.frombuffer(bytes(pending[:k * row.itemsize]), row)
    del pending[:k * row.itemsize]
    for name in ("v", "t", "p", "y", "tag"):
        a[name].astype(a[name].dtype.newbyteorder("="))
    return k


def read_sqlite(engine: sa.Engine, model_id: int) -> int:
    with engine.connect() as conn:
        rows = conn.exec_driver_sql(
            "SELECT predictions.version, predictions.scored_at, predictions.probability, "
            "coalesce(outcomes.label, -1), predictions.tags FROM predictions LEFT JOIN outcomes "
            "ON outcomes.model_id = predictions.model_id AND outcomes.case_id = predictions.case_id "
            "WHERE predictions.model_id = ?", (model_id,)).fetchall()
    v, t, p, y, tags = zip(*rows, strict=True)
    codes: dict[str, int] = {}
    probability = np.asarray(p, np.float64)
    for column in (np.asarray(v), np.asarray(t), np.asarray(y, np.int8),
                   np.fromiter((codes.setdefault(x, len(codes)) for x in tags), np.int64, len(tags))):
        assert column.size == probability.size
    return int(probability.size)


def run(dialect: str, url: str, n_rows: int, *, days: int = 364,
        increments: tuple[float, ...] = (0.01, 0.10)) -> dict[str, Any]:
    engine = make_engine(Settings(database_url=url))
    clock = FixedClock(NOW)
    try:
        model_id = create_model(engine)
        t = time.perf_counter()
        (load_postgres if dialect == "postgresql" else load_sqlite)(engine, model_id, n_rows, days)
        load_s = time.perf_counter() - t
        with engine.connect() as conn:
            n_buckets = int(conn.execute(sa.text("SELECT count(*) FROM dirty_buckets")).scalar() or 0)

        t = time.perf_counter()
        read_rows = (read_postgres if dialect == "postgresql" else read_sqlite)(engine, model_id)
        read_s = time.perf_counter() - t
        assert read_rows == n_rows

        with PeakRss() as memory:
            t = time.perf_counter()
            full = refresh_dirty(engine, clock, worker="bench-full")
            full_s = time.perf_counter() - t
        assert full.rows_read == n_rows, (full.rows_read, n_rows)
        assert full.buckets == n_buckets

        incremental = []
        rng = random.Random(5)
        with engine.connect() as conn:
            keys = [BucketKey(model_id, v, h) for v, h in conn.execute(sa.text(
                "SELECT DISTINCT version, hour FROM bucket_summaries"))]
        keys = [BucketKey(k.model_id, k.version, _aware(k.hour)) for k in sorted(keys)]
        for share in increments:
            chosen = rng.sample(keys, max(1, round(len(keys) * share)))
            with engine.begin() as conn:
                dirty.mark(conn, chosen, NOW)
            t = time.perf_counter()
            report = refresh_dirty(engine, clock, worker=f"bench-{share}")
            seconds = time.perf_counter() - t
            incremental.append({"share": share, "buckets": report.buckets, "rows": report.rows_read,
                                "days": len(report.merged_days), "s": seconds})
        with engine.connect() as conn:
            summaries = int(conn.execute(sa.text("SELECT count(*) FROM bucket_summaries")).scalar() or 0)
        return {
            "dialect": dialect, "rows": n_rows, "buckets": n_buckets, "load_s": load_s,
            "read_s": read_s, "read_rows_per_s": n_rows / read_s,
            "full_s": full_s, "full_rows_per_s": n_rows / full_s, "ratio": read_s / full_s,
            "memory_added_mib": memory.added_mib, "days": len(full.merged_days),
            "summaries": summaries, "incremental": incremental,
        }
    finally:
        engine.dispose()


def _aware(instant: Any) -> datetime:
    if isinstance(instant, str):
        instant = datetime.fromisoformat(instant)
    return instant if instant.tzinfo else instant.replace(tzinfo=UTC)


def format_result(r: dict[str, Any]) -> str:
    pad = " " * 10
    lines = [
        (f"{r['dialect']:>10} {r['rows']:>11,} rows {r['buckets']:>6,} buckets ({len(VERSIONS)} versions, "
         f"2 segment keys, {r['summaries']:,} bucket summaries) | load {r['load_s']:.1f} s"),
        (f"{pad} read into numpy {r['read_s']:7.2f} s = {r['read_rows_per_s']:>10,.0f} rows/s | "
         f"full refresh {r['full_s']:7.2f} s = {r['full_rows_per_s']:>10,.0f} rows/s, "
         f"{r['days']} days merged | ratio to the read {r['ratio']:.2f} | "
         f"peak memory added {r['memory_added_mib']:.0f} MiB"),
    ]
    for inc in r["incremental"]:
        per_row = inc["s"] / max(1, inc["rows"]) * 1e6
        lines.append(f"{pad} {100 * inc['share']:>4.0f} % dirty: {inc['buckets']:,} buckets, "
                     f"{inc['rows']:,} rows, {inc['days']} days in {inc['s']:.2f} s "
                     f"= {per_row:.1f} µs a dirty row")
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--postgres", default="1000000", help="comma-separated row counts ('' for none)")
    parser.add_argument("--sqlite", default="1000000", help="comma-separated row counts ('' for none)")
    parser.add_argument("--small", action="store_true", help="20,000 rows over 14 days on each database")
    args = parser.parse_args()
    sizes = {"postgresql": [20_000] if args.small else [int(s) for s in args.postgres.split(",") if s],
             "sqlite": [20_000] if args.small else [int(s) for s in args.sqlite.split(",") if s]}
    base = os.environ.get("CALIBRANT_TEST_POSTGRES_URL", DEFAULT_URL)
    days = 14 if args.small else 364
    for dialect, counts in sizes.items():
        for n in counts:
            load = os.getloadavg()
            if dialect == "postgresql":
                with migrated_postgres_schema(base) as url:
                    result = run(dialect, url, n, days=days)
            else:
                with tempfile.TemporaryDirectory() as folder:
                    result = run(dialect, migrated_sqlite(Path(folder) / "bench.db"), n, days=days)
            after = os.getloadavg()
            print(format_result(result), flush=True)
            print(f"{'':>10} load average {load[0]:.2f} before, {after[0]:.2f} after, "
                  f"on {os.cpu_count()} CPUs", flush=True)


if __name__ == "__main__":
    main()
