"""Benchmark: new chart rules on a year of history (PostgreSQL), time and peak memory.

    python tests/bench/charts_history.py                 # 100k and 1M cases
    python tests/bench/charts_history.py --sizes 20000   # any sizes

A model without an outcome horizon gets a year of predictions with outcomes
(server-side generation, ``query_load``), then its default chart rules (upper
and lower, window rules disabled) run for the first time, reading the whole
history. Printed per size: the server-side load (the database's own bulk path,
as the yardstick), the chart job's cases/s, and the peak memory it added; then,
for comparison, the peak of reading the same history in one piece (the reader
before day windows). Each measurement runs in a fresh process so that the
peak resident size (ru_maxrss) belongs to it alone.
"""

from __future__ import annotations

import argparse
import multiprocessing
import os
import resource
import sys
import time
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import sqlalchemy as sa

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
from tests.bench.query import DEFAULT_URL, NOW, create_model, scratch_schema
from tests.bench.query_load import VERSION, load_year

from calibrant.alarms import jobs, service
from calibrant.config import Settings
from calibrant.store.alarm_tables import AlarmRule, ChartStream
from calibrant.store.engine import make_engine, make_session_factory
from calibrant.store.mature_cases import mature_cases
from calibrant.store.tables import Model

CHARTS = ("calibration-chart-upper", "calibration-chart-lower")


def _rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # KiB on Linux


def _charts_only(url: str) -> None:
    engine = make_engine(Settings(database_url=url))
    sessions = make_session_factory(engine)
    with sessions() as session:
        model = session.scalars(sa.select(Model)).one()
        service.ensure_defaults(session, model, NOW)
        for rule in session.scalars(sa.select(AlarmRule).where(AlarmRule.model_id == model.id)):
            rule.enabled = rule.name in CHARTS
        session.commit()
    engine.dispose()


def _chart_job(url: str, out: Any) -> None:
    engine = make_engine(Settings(database_url=url))
    before = _rss_mib()
    t = time.perf_counter()
    report = jobs.evaluate_all(engine, NOW)
    seconds = time.perf_counter() - t
    with engine.connect() as conn:
        consumed = dict(conn.execute(sa.select(AlarmRule.name, ChartStream.consumed).join(
            ChartStream, ChartStream.rule_id == AlarmRule.id).where(ChartStream.segment_key == "")).all())
    engine.dispose()
    out.put({"seconds": seconds, "cases": report.cases, "peak_mib": _rss_mib() - before,
             "consumed_all": consumed})


def _one_read(url: str, out: Any) -> None:
    engine = make_engine(Settings(database_url=url))
    before = _rss_mib()
    t = time.perf_counter()
    with make_session_factory(engine)() as session:
        model = session.scalars(sa.select(Model)).one()
        cases = mature_cases(session.connection(), model, VERSION, after=None,
                             until=NOW)
    out.put({"seconds": time.perf_counter() - t, "cases": len(cases), "peak_mib": _rss_mib() - before})
    engine.dispose()


def _in_child(target, url: str) -> dict[str, Any]:
    ctx = multiprocessing.get_context("spawn")
    out = ctx.Queue()
    child = ctx.Process(target=target, args=(url, out))
    child.start()
    result = out.get(timeout=3600)
    child.join()
    return result


def run(base: str, n_rows: int, hours_per_day: int = 24) -> dict[str, Any]:
    url, admin, schema = scratch_schema(base)
    try:
        engine = make_engine(Settings(database_url=url))
        model_id = create_model(engine)
        t = time.perf_counter()
        load_year(engine, model_id, n_rows, hours_per_day)
        load_s = time.perf_counter() - t
        engine.dispose()
        _charts_only(url)
        job = _in_child(_chart_job, url)
        whole = _in_child(_one_read, url)
        return {"rows": n_rows, "load_s": load_s, "load_rows_per_s": n_rows / load_s, "job": job,
                "whole": whole}
    finally:
        with admin.begin() as conn:
            conn.exec_driver_sql(f'DROP SCHEMA "{schema}" CASCADE')
        admin.dispose()


def format_row(r: dict[str, Any]) -> str:
    job, whole = r["job"], r["whole"]
    return (f"{r['rows']:>10,} cases | server-side load {r['load_rows_per_s']:>9,.0f} rows/s | "
            f"chart job (2 rules, first run) {job['seconds']:6.1f} s = "
            f"{job['cases'] / job['seconds']:>8,.0f} cases/s, peak +{job['peak_mib']:6.1f} MiB | "
            f"whole history in one read: "
            f"{whole['seconds']:5.1f} s, peak +{whole['peak_mib']:6.1f} MiB")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="100000,1000000", help="comma-separated case counts")
    args = parser.parse_args()
    base = os.environ.get("CALIBRANT_TEST_POSTGRES_URL", DEFAULT_URL)
    for n in (int(s) for s in args.sizes.split(",")):
        print(format_row(run(base, n)), flush=True)
    print(f"at {datetime.now(UTC):%Y-%m-%d %H:%M} UTC, {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
