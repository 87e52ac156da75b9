"""CI version of tests/bench/hosmer_lemeshow_null.py: the served p-value holds its level."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

from scipy import stats

# Chance that a test rejecting at exactly its stated level falls outside the band (both tails).
BAND_MISS = 1e-4


def load_bench():
    path = Path(__file__).with_name("hosmer_lemeshow_null.py")
    spec = importlib.util.spec_from_file_location("hosmer_lemeshow_null_bench", path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up here
    spec.loader.exec_module(module)
    return module


def binomial_band(m: int, alpha: float) -> tuple[float, float]:
    """Central interval holding 1 − BAND_MISS of Binomial(m, alpha) (scipy.stats.binom)."""
    return (stats.binom.ppf(BAND_MISS / 2, m, alpha), stats.binom.isf(BAND_MISS / 2, m, alpha))


def test_small_null_rejection_table():
    rows = {(r.risk, r.n): r for r in load_bench().run(small=True)}
    assert set(rows) == {("Beta(5,5)", 1_000), ("Beta(2,8)", 4_000), ("Beta(1,20)", 2_000)}
    for cell in (("Beta(5,5)", 1_000), ("Beta(2,8)", 4_000)):
        r = rows[cell]
        # every group well above the floor here (median min expected ~ 24 and ~ 16)
        assert r.with_p >= 0.95 * r.reps
        for alpha, served, from_groups in ((0.05, r.served_05, r.groups_path_served_05),
                                           (0.01, r.served_01, r.groups_path_served_01)):
            lo, hi = binomial_band(r.with_p, alpha)
            assert lo <= served <= hi, (cell, alpha, served, lo, hi)
            assert from_groups == served  # group-totals path: same p-values
        # the development-sample rule χ²_{g−2} over-rejects: far above the 5 % band
        assert r.dev_05 > binomial_band(r.reps, 0.05)[1]
        assert r.max_abs_diff_groups_path < 1e-9
    rare = rows[("Beta(1,20)", 2_000)]
    # lowest group expects about half an event: the statistic comes without a p-value
    assert rare.median_min_expected < 1.0
    assert rare.with_p == 0
    assert rare.served_05 == rare.served_01 == 0
