"""CI version of tests/bench/retention.py: half the rows removed, in several bounded transactions,
every summary kept, the figures finite and positive."""

from __future__ import annotations

import math

from tests.bench import retention as bench
from tests.conftest import Database


def test_small_retention_benchmark(db: Database) -> None:
    result = bench.run_dialect(db.dialect, db.url, bench.SMALL_ROWS, batch_rows=100)
    assert result["summaries_kept"], result
    assert result["predictions_removed"] == bench.SMALL_ROWS // 2
    assert result["predictions_left"] == bench.SMALL_ROWS - bench.SMALL_ROWS // 2
    assert result["transactions"] > bench.SMALL_ROWS // 2 // 100  # bounded batches, not one statement
    assert all(math.isfinite(result[k]) and result[k] > 0 for k in ("rows_per_s", "longest_ms")), result
    assert f"{bench.SMALL_ROWS:,}" in bench.format_table([result])
