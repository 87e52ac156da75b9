"""CI version of tests/bench/cusum.py: figures finite, Markov and simulation agree."""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path


def load_bench():
    path = Path(__file__).with_name("cusum.py")
    spec = importlib.util.spec_from_file_location("cusum_bench", path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up here
    spec.loader.exec_module(module)
    return module


def test_small_benchmark_figures():
    rows = load_bench().run(small=True)
    assert len(rows) == 2 * 2 * 2  # two mixes, two charts, two targets
    for row in rows:
        assert math.isfinite(row.h)
        assert row.h > 0
        assert math.isfinite(row.design_ms)
        assert row.discretisation_change < 0.05
        if row.target == 1e4:
            # docs/methods.md §18 step 4: chain and simulation agree; allow 3 Monte-Carlo SE
            # plus 2 % for the chain's discretisation.
            assert abs(row.sim_ratio - 1.0) < 3 * row.sim_ratio_se + 0.02
