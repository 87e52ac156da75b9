"""Benchmark: `calibrant import` of a CSV and a Parquet file against HTTP ingest of the same rows.

    python -m tests.bench.import [--small] [--dialect sqlite|postgresql|both]

For each dialect, in one run: rows/s posting the rows through a real ``calibrant serve`` (one
client, 10,000-item batches, bodies serialised before the clock starts); rows/s of
``calibrant import predictions`` of the same rows from a CSV and from a Parquet file, each in a
process of its own (wall time from its start to its exit, interpreter start-up included); the
ratio import/HTTP; and the import process's peak resident memory (``VmHWM`` of
``/proc/<pid>/status``, read until it exits: ``ru_maxrss`` would count the bench's own memory,
which the child shares between fork and exec). Each path stores into a model of its own; the
stored rows of each are compared with the HTTP model's (count, distinct ids, sum of
probabilities, tag lengths, latest time).
Timing is printed, never asserted.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import sqlalchemy as sa
from tests.bench.ingest import POSTGRES_URL, http_run
from tests.bench.ingest_rows import BenchRows, Checksum, http_bodies, make_rows
from tests.bench.scratch_schema import migrated_postgres_schema, migrated_sqlite
from tests.system.server import running_server

from calibrant.config import Settings
from calibrant.store.engine import make_engine

FULL_ROWS = 1_000_000
SMALL_ROWS = 5_000
HTTP_BATCH = 10_000
MEMORY_GOAL_MIB = 300


def write_files(rows: BenchRows, work_dir: Path) -> tuple[Path, Path]:
    frame = pd.DataFrame({
        "id": rows.case_id, "version": rows.version, "probability": rows.probability,
        "scored_at": pd.to_datetime(rows.scored_at, utc=True),
        "tag.region": [t["region"] for t in rows.tags], "tag.channel": [t["channel"] for t in rows.tags],
    })
    parquet = work_dir / "scores.parquet"
    frame.to_parquet(parquet, index=False)
    csv = work_dir / "scores.csv"
    frame.assign(scored_at=frame["scored_at"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")).to_csv(csv, index=False)
    return csv, parquet


def import_run(database_url: str, model: str, path: Path) -> tuple[float, float]:
    """(seconds, peak MiB) of one `calibrant import predictions` process."""
    env = {**os.environ, "CALIBRANT_DATABASE_URL": database_url}
    start = time.perf_counter()
    process = subprocess.Popen(
        [sys.executable, "-m", "calibrant.cli", "import", "predictions", str(path), "--model", model,
         "--quiet"], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
    )
    peak_kib = 0
    while process.poll() is None:
        peak_kib = max(peak_kib, _high_water_kib(process.pid))
        time.sleep(0.05)
    seconds = time.perf_counter() - start
    output = (process.stdout.read() + process.stderr.read()).decode() if process.stdout and process.stderr \
        else ""
    if process.returncode != 0:
        raise RuntimeError(f"import of {path.name} failed: {output[-2000:]}")
    return seconds, peak_kib / 1024


def _high_water_kib(pid: int) -> int:
    """The process's peak resident set so far (the kernel's own high-water mark), 0 once gone."""
    try:
        status = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return 0
    return next((int(line.split()[1]) for line in status.splitlines() if line.startswith("VmHWM:")), 0)


def model_checksum(conn: sa.Connection, model: str) -> Checksum:
    row = conn.execute(sa.text(
        "SELECT count(*), count(DISTINCT p.case_id), sum(p.probability), sum(length(p.tags)), "
        "max(p.scored_at) FROM predictions p JOIN models m ON m.id = p.model_id WHERE m.name = :name"),
        {"name": model}).one()
    latest = row[4]
    latest_text = latest.strftime("%Y-%m-%d %H:%M:%S") if hasattr(latest, "strftime") else str(latest)[:19]
    return Checksum(int(row[0]), int(row[1]), float(row[2] or 0.0), int(row[3] or 0), latest_text)


def run_dialect(dialect: str, database_url: str, work_dir: Path, n_rows: int) -> dict:
    rows = make_rows(n_rows)
    csv, parquet = write_files(rows, work_dir)
    result: dict = {"dialect": dialect, "rows": n_rows}
    bodies = http_bodies(rows, HTTP_BATCH)
    with running_server(database_url, work_dir / f"server-{dialect}.log") as server:
        result["http_rows_per_s"] = n_rows / http_run(server.base_url, "bench-http", bodies)
    del bodies
    for name, path in (("csv", csv), ("parquet", parquet)):
        seconds, mib = import_run(database_url, f"bench-{name}", path)
        result[f"{name}_rows_per_s"] = n_rows / seconds
        result[f"{name}_ratio"] = result[f"{name}_rows_per_s"] / result["http_rows_per_s"]
        result[f"{name}_peak_mib"] = mib
    engine = make_engine(Settings(database_url=database_url))
    try:
        with engine.connect() as conn:
            sums = {name: model_checksum(conn, f"bench-{name}") for name in ("http", "csv", "parquet")}
    finally:
        engine.dispose()
    result["checksums"] = sums
    result["stored_rows_agree"] = all(s.agrees_with(sums["http"]) and s.rows == n_rows for s in sums.values())
    return result


def _sqlite(work_dir: Path, n_rows: int) -> dict:
    return run_dialect("sqlite", migrated_sqlite(work_dir / "bench.db"), work_dir, n_rows)


def _postgresql(work_dir: Path, n_rows: int) -> dict:
    with migrated_postgres_schema(POSTGRES_URL) as url:
        return run_dialect("postgresql", url, work_dir, n_rows)


def format_table(results: list[dict]) -> str:
    lines = [f"{'dialect':<11} {'path':<32} {'rows':>10} {'rows/s':>10} {'x HTTP':>7} {'peak MiB':>9}"]
    for r in results:
        lines.append(f"{r['dialect']:<11} {f'HTTP, {HTTP_BATCH:,}-item batches':<32} {r['rows']:>10,} "
                     f"{r['http_rows_per_s']:>10,.0f}")
        for name in ("csv", "parquet"):
            lines.append(f"{r['dialect']:<11} {f'calibrant import, {name}':<32} {r['rows']:>10,} "
                         f"{r[f'{name}_rows_per_s']:>10,.0f} {r[f'{name}_ratio']:>7.2f} "
                         f"{r[f'{name}_peak_mib']:>9.0f}")
        agree = "agree" if r["stored_rows_agree"] else "DIFFER"
        lines.append(f"{'':<11} stored rows, import vs HTTP: {agree} (memory goal < {MEMORY_GOAL_MIB} MiB)")
    return "\n".join(lines)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help=f"{SMALL_ROWS:,} rows instead of {FULL_ROWS:,}")
    parser.add_argument("--dialect", choices=["sqlite", "postgresql", "both"], default="both")
    args = parser.parse_args()
    dialects = ("sqlite", "postgresql") if args.dialect == "both" else (args.dialect,)
    n_rows = SMALL_ROWS if args.small else FULL_ROWS
    runners = {"sqlite": _sqlite, "postgresql": _postgresql}
    load_before = os.getloadavg()
    with tempfile.TemporaryDirectory(prefix="calibrant-bench-") as tmp:
        results = []
        for dialect in dialects:
            (Path(tmp) / dialect).mkdir()
            results.append(runners[dialect](Path(tmp) / dialect, n_rows))
    print(format_table(results))
    # The machine may be shared: the load says how much the figures can be trusted.
    print("load average (1, 5, 15 min) before: {:.2f} {:.2f} {:.2f}; after: {:.2f} {:.2f} {:.2f}".format(
        *load_before, *os.getloadavg()))
    return 0 if all(r["stored_rows_agree"] for r in results) else 1


if __name__ == "__main__":
    sys.exit(main())
