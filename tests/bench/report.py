"""Report benchmark on PostgreSQL: a 52-week governance report over 1M predictions (goal: 10 s).

    python -m tests.bench.report            # 1,000,000 predictions
    python -m tests.bench.report --small    # the CI-sized run (tests/bench/test_report_bench_small.py)

Times, in one scratch schema of CALIBRANT_TEST_POSTGRES_URL (default: the local test server):
the report as of now (labels read from ``outcomes``), the report as of a past instant (labels
from ``outcome_revisions`` as of then, plus the restatements' second pass at now), and the
HTML and PDF rendering; and, as the database's own bulk operation over the same rows, one
aggregate of the predictions joined with their labels, so the report's cost reads as a ratio.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import uuid
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from sqlalchemy.orm import Session

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
from tests.bench.report_load import load

from calibrant.clock import rfc3339
from calibrant.config import Settings
from calibrant.reports import build, render
from calibrant.store import migrate
from calibrant.store.engine import make_engine

DEFAULT_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"
MODEL = "bench-report"
YEAR_START = datetime(2025, 1, 6, tzinfo=UTC)  # a Monday: 52 whole ISO weeks follow
YEAR_END = YEAR_START + timedelta(weeks=52)
LATE_AT = YEAR_START + timedelta(days=395)  # late first labels and corrections arrive here
AS_OF_PAST = YEAR_START + timedelta(days=390)
NOW = YEAR_START + timedelta(days=400)

_BULK = """
SELECT count(*), sum(p.probability), sum(o.label) FROM predictions p
LEFT JOIN outcomes o ON o.model_id = p.model_id AND o.case_id = p.case_id
WHERE p.model_id = :m AND p.scored_at >= :lo AND p.scored_at < :hi
"""


def _create_model(engine: sa.Engine) -> int:
    with engine.begin() as conn:
        return int(conn.execute(sa.text(
            "INSERT INTO models (name, description, outcome_lag_days, implicit_negatives, segment_keys, "
            "false_alarms_per_year, settings_generation, created_at, updated_at) "
            "VALUES (:n, '', 0, false, '[\"region\"]', 1.0, 1, :t, :t) RETURNING id"),
            {"n": MODEL, "t": YEAR_START}).scalar())


def _report(engine: sa.Engine, as_of: datetime | None) -> tuple[build.Report, float]:
    started = time.perf_counter()
    with Session(engine) as session:
        report = build.build(session, MODEL, start=rfc3339(YEAR_START), end=rfc3339(YEAR_END),
                             as_of=None if as_of is None else rfc3339(as_of), now=NOW, actor="bench")
        session.commit()
    return report, time.perf_counter() - started


def run(url: str, n_rows: int) -> dict[str, Any]:
    engine = make_engine(Settings(database_url=url))
    migrate.upgrade(engine)
    model_id = _create_model(engine)
    started = time.perf_counter()
    load(engine, model_id, n_rows, YEAR_START, LATE_AT)
    load_s = time.perf_counter() - started
    print(f"loaded {n_rows:,} predictions in {load_s:.1f} s", flush=True)

    started = time.perf_counter()
    with engine.connect() as conn:
        conn.execute(sa.text(_BULK), {"m": model_id, "lo": YEAR_START, "hi": YEAR_END}).one()
    bulk_s = time.perf_counter() - started

    now_report, now_s = _report(engine, None)
    print(f"report as of now: {now_s:.2f} s", flush=True)
    past_report, past_s = _report(engine, AS_OF_PAST)
    print(f"report as of a past instant (with restatements): {past_s:.2f} s", flush=True)
    started = time.perf_counter()
    html = render.render(past_report, "html")
    html_s = time.perf_counter() - started
    started = time.perf_counter()
    pdf = render.render(past_report, "pdf")
    pdf_s = time.perf_counter() - started
    engine.dispose()
    return {
        "n_rows": n_rows, "load_s": load_s, "bulk_join_s": bulk_s,
        "report_now_s": now_s, "report_past_s": past_s,
        "rows_per_s_now": n_rows / now_s, "ratio_now_to_bulk": now_s / bulk_s,
        "html_s": html_s, "pdf_s": pdf_s, "html_bytes": len(html), "pdf_bytes": len(pdf),
        "now_report": now_report, "past_report": past_report, "model_id": model_id,
    }


def _scratch_url(base: str) -> tuple[str, str]:
    schema = f"calibrant_bench_{uuid.uuid4().hex[:8]}"
    return schema, f"{base}{'&' if '?' in base else '?'}options=-csearch_path%3D{schema}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--small", action="store_true", help="20,000 predictions")
    parser.add_argument("--rows", type=int, default=1_000_000)
    args = parser.parse_args()
    n_rows = 20_000 if args.small else args.rows
    base = os.environ.get("CALIBRANT_TEST_POSTGRES_URL", DEFAULT_URL)
    schema, url = _scratch_url(base)
    admin = sa.create_engine(base)
    with admin.begin() as conn:
        conn.exec_driver_sql(f"CREATE SCHEMA {schema}")
    try:
        result = run(url, n_rows)
    finally:
        with admin.begin() as conn:
            conn.exec_driver_sql(f"DROP SCHEMA {schema} CASCADE")
        admin.dispose()
    restated = result["past_report"].restatements
    print(f"\n52-week report, {n_rows:,} predictions (PostgreSQL, this machine)")
    print(f"  report as of now             {result['report_now_s']:8.2f} s  "
          f"({result['rows_per_s_now']:,.0f} rows/s; goal <= 10 s)")
    print(f"  report as of a past instant  {result['report_past_s']:8.2f} s  "
          f"(labels as of then, plus the restatements' pass at now)")
    print(f"  database's own join+aggregate {result['bulk_join_s']:7.2f} s  "
          f"(report as of now = {result['ratio_now_to_bulk']:.1f} x that)")
    print(f"  HTML render {result['html_s']:.2f} s ({result['html_bytes']:,} bytes), "
          f"PDF render {result['pdf_s']:.2f} s ({result['pdf_bytes']:,} bytes)")
    print(f"  arrived after the past as_of: {restated['arrived_after_as_of']}, "
          f"{len(restated['changed'])} figures restated")


if __name__ == "__main__":
    main()
