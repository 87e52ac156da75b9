"""Benchmark: the retention job removing old raw rows in bounded batches.

    python -m tests.bench.retention [--small] [--dialect sqlite|postgresql|both] [--batch-rows N]

For each dialect: 200,000 predictions scored over the 60 days before the clock's midnight, each with
an outcome, are written through the ingest writes and summarised by the refresh; then the model gets
30 days of retention and one run of the retention job removes the older half. Printed: rows removed
per second (predictions, outcomes and label history together), the number of transactions and the
longest one in milliseconds (what ingest may wait for, measured from BEGIN to COMMIT on the engine),
and whether the summaries are all still there. Timing is printed, never asserted.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from tests.bench.ingest import POSTGRES_URL
from tests.bench.scratch_schema import migrated_postgres_schema, migrated_sqlite

from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.retention.job import apply_retention
from calibrant.rollup.refresh import refresh_dirty
from calibrant.store.batches import OutcomeColumns, PredictionColumns
from calibrant.store.engine import make_engine, make_session_factory
from calibrant.store.ingest_writes import insert_predictions, upsert_outcomes
from calibrant.store.models_repo import get_or_create

FULL_ROWS = 200_000
SMALL_ROWS = 2_000
NOW = datetime(2026, 3, 2, 8, tzinfo=UTC)
SPAN = timedelta(days=60)
WRITE_BATCH = 10_000


@dataclass
class Transactions:
    """BEGIN-to-COMMIT durations on one engine, while ``recording``."""

    recording: bool = False
    started: dict[int, float] = field(default_factory=dict)
    durations: list[float] = field(default_factory=list)

    def attach(self, engine: sa.Engine) -> None:
        sa.event.listen(engine, "begin", self._begin)
        sa.event.listen(engine, "commit", self._end)
        sa.event.listen(engine, "rollback", self._end)

    def _begin(self, conn: sa.Connection) -> None:
        if self.recording:
            self.started[id(conn)] = time.perf_counter()

    def _end(self, conn: sa.Connection) -> None:
        began = self.started.pop(id(conn), None)
        if began is not None:
            self.durations.append(time.perf_counter() - began)


def _fill(engine: sa.Engine, n_rows: int) -> int:
    step = SPAN / n_rows
    start = NOW.replace(hour=0) - SPAN  # from a midnight, so 30 days of retention keep half exactly
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        model, _ = get_or_create(session, "bench-retention", start)
        model_id = model.id
    for lo in range(0, n_rows, WRITE_BATCH):
        idx = range(lo, min(lo + WRITE_BATCH, n_rows))
        scored = [start + step * i for i in idx]
        ids = [f"case-{i:08d}" for i in idx]
        with engine.begin() as conn:
            insert_predictions(conn, model_id, PredictionColumns(
                ids, ["v1"] * len(ids), [((i * 7919) % 1000) / 1000 for i in idx], scored, [None] * len(ids)),
                NOW)
            upsert_outcomes(conn, model_id, OutcomeColumns(
                ids, [i % 3 == 0 for i in idx], [t + timedelta(hours=1) for t in scored], [None] * len(ids)),
                NOW)
    return model_id


def run_dialect(dialect: str, database_url: str, n_rows: int, batch_rows: int) -> dict[str, Any]:
    engine = make_engine(Settings(database_url=database_url))
    clock = FixedClock(NOW)
    model_id = _fill(engine, n_rows)
    refresh_dirty(engine, clock, worker="bench")
    with engine.begin() as conn:
        conn.execute(sa.text("UPDATE models SET retention_days = 30 WHERE id = :id"), {"id": model_id})
        summaries = conn.execute(sa.text("SELECT count(*) FROM bucket_summaries")).scalar()
    watch = Transactions()
    watch.attach(engine)
    watch.recording = True
    started = time.perf_counter()
    report = apply_retention(engine, clock, Settings(database_url=database_url), worker="bench",
                             batch_rows=batch_rows)
    seconds = time.perf_counter() - started
    watch.recording = False
    with engine.begin() as conn:
        left = conn.execute(sa.text("SELECT count(*) FROM predictions")).scalar()
        summaries_after = conn.execute(sa.text("SELECT count(*) FROM bucket_summaries")).scalar()
    engine.dispose()
    figures = report.as_dict()
    removed = figures["predictions"] + figures["outcomes"] + figures["outcome_revisions"]
    return {
        "dialect": dialect, "rows": n_rows, "batch_rows": batch_rows, "removed": removed,
        "predictions_removed": figures["predictions"], "predictions_left": left,
        "rows_per_s": removed / seconds, "seconds": seconds, "transactions": len(watch.durations),
        "longest_ms": 1000 * max(watch.durations, default=0.0),
        "summaries_kept": summaries == summaries_after and bool(summaries),
    }


def format_table(results: list[dict[str, Any]]) -> str:
    header = (f"{'dialect':<11} {'rows':>9} {'removed':>9} {'rows/s':>9} {'s':>7} {'batch':>6} "
              f"{'txns':>6} {'longest ms':>11}  summaries")
    lines = [header]
    for r in results:
        kept = "kept" if r["summaries_kept"] else "CHANGED"
        lines.append(f"{r['dialect']:<11} {r['rows']:>9,} {r['removed']:>9,} {r['rows_per_s']:>9,.0f} "
                     f"{r['seconds']:>7.2f} {r['batch_rows']:>6,} {r['transactions']:>6} "
                     f"{r['longest_ms']:>11.1f}  {kept}")
    return "\n".join(lines)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help=f"{SMALL_ROWS:,} rows instead of {FULL_ROWS:,}")
    parser.add_argument("--dialect", choices=["sqlite", "postgresql", "both"], default="both")
    parser.add_argument("--batch-rows", type=int, default=Settings().retention_batch_rows)
    args = parser.parse_args()
    n_rows = SMALL_ROWS if args.small else FULL_ROWS
    load_before = os.getloadavg()
    results = []
    with tempfile.TemporaryDirectory(prefix="calibrant-bench-") as tmp:
        if args.dialect in ("sqlite", "both"):
            results.append(run_dialect("sqlite", migrated_sqlite(Path(tmp) / "retention.db"), n_rows,
                                       args.batch_rows))
        if args.dialect in ("postgresql", "both"):
            with migrated_postgres_schema(POSTGRES_URL) as url:
                results.append(run_dialect("postgresql", url, n_rows, args.batch_rows))
    print(format_table(results))
    print("load average (1, 5, 15 min) before: {:.2f} {:.2f} {:.2f}; after: {:.2f} {:.2f} {:.2f}".format(
        *load_before, *os.getloadavg()))
    return 0 if all(r["summaries_kept"] for r in results) else 1


if __name__ == "__main__":
    sys.exit(main())
