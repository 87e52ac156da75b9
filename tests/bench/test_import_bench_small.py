"""CI version of tests/bench/import.py: figures finite and positive, every path stored the same rows."""

from __future__ import annotations

import importlib
import math
from pathlib import Path

from tests.conftest import Database

bench = importlib.import_module("tests.bench.import")  # `import` is a keyword: no from-import


def test_small_import_benchmark(db: Database, tmp_path: Path) -> None:
    result = bench.run_dialect(db.dialect, db.url, tmp_path, bench.SMALL_ROWS)
    figures = [result[k] for k in ("http_rows_per_s", "csv_rows_per_s", "parquet_rows_per_s",
                                   "csv_ratio", "parquet_ratio", "csv_peak_mib", "parquet_peak_mib")]
    assert all(math.isfinite(f) and f > 0 for f in figures), result
    assert result["stored_rows_agree"], result["checksums"]
    assert result["checksums"]["csv"].rows == bench.SMALL_ROWS
    assert f"{bench.SMALL_ROWS:,}" in bench.format_table([result])
