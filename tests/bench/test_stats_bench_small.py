"""Runs the statistics benchmark at small size: figures finite, results equal sklearn's.

No timing assertion (machines differ); the script itself reports the ratios.
"""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path


def _load_bench():
    # the benchmark is a script beside this file, not a package module
    spec = importlib.util.spec_from_file_location("stats_bench", Path(__file__).with_name("stats.py"))
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


def test_small_benchmark_figures() -> None:
    results = _load_bench().run(small=True)
    for group, figs in results.items():
        for key, value in figs.items():
            assert math.isfinite(value), f"{group}.{key}"
    small = results["n=100000"]
    # source: sklearn.metrics.log_loss / brier_score_loss / roc_auc_score on the same arrays
    assert small["log_loss_max_abs_diff"] <= 1e-12
    assert small["brier_max_abs_diff"] <= 1e-12
    assert small["auc_max_abs_diff"] <= 1e-12
    assert small["build_rows_per_s"] > 0
    assert results["hourly"]["all_metrics_ok"] == 1.0
    assert results["hourly"]["n_summaries"] == 24 * 30
