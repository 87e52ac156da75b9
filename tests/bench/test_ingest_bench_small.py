"""CI version of tests/bench/ingest.py: figures finite and positive, HTTP and raw stored the same rows."""

from __future__ import annotations

import math
from pathlib import Path

from tests.bench.ingest import BATCH_SIZES, SMALL_ROWS, format_table, run_dialect
from tests.conftest import Database


def test_small_ingest_benchmark(db: Database, tmp_path: Path):
    result = run_dialect(db.dialect, db.url, tmp_path, SMALL_ROWS)
    figures = [result["raw_rows_per_s"], result["http_outcomes_rows_per_s"], result["ratio_outcomes"]]
    for batch_size in BATCH_SIZES:
        figures += [result[f"http_{batch_size}_rows_per_s"], result[f"ratio_{batch_size}"]]
    assert all(math.isfinite(f) and f > 0 for f in figures), result
    checksums = result["checksums"]
    assert set(checksums) == {"raw", *(f"http_{b}" for b in BATCH_SIZES)}
    for name, stored in checksums.items():
        assert stored.rows == SMALL_ROWS, name
        assert stored.distinct_ids == SMALL_ROWS, name
        assert stored.agrees_with(checksums["raw"]), f"{name} stored other rows than the raw insert"
    assert result["stored_rows_agree"]
    assert f"{SMALL_ROWS:,}" in format_table([result])
