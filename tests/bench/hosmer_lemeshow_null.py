"""Benchmark: null rejection of the Hosmer–Lemeshow test for a model fixed in advance.

    python tests/bench/hosmer_lemeshow_null.py [--small]

Monitoring scores predictions from a model fitted elsewhere, so on the monitored
data the risks p are given and, when the model is calibrated, y ~ Bernoulli(p).
For each risk distribution and window size the bench draws ``reps`` calibrated
windows (fresh p and y each time), computes Ĉ with the default ten equal-count
groups and counts how often each reference distribution rejects at 5 % and 1 %:

* χ²_{g−2}: the development-sample rule, on every window;
* χ²_g on every window, with the group floor switched off (``min_expected=0``);
* ``p_value`` as served: χ²_g, given only when every group has at least
  ``P_VALUE_MIN_EXPECTED`` expected events and non-events (share in ``with p``).

The same windows go through both entry points, the row-level
``hosmer_lemeshow`` and ``hosmer_lemeshow_from_groups`` fed with group totals
computed here by ``np.array_split``; ``max |ΔĈ|`` is their largest difference.
The mergeable hourly summaries do not provide Hosmer–Lemeshow (docs/methods.md
§2), so there is no third path. A calibrated test should reject about α; the
Monte-Carlo SE of a rate α over R windows is sqrt(α(1 − α)/R).
"""

from __future__ import annotations

import argparse
import math
import time
from dataclasses import dataclass

import numpy as np
from scipy import stats

from calibrant.stats.calibration import (
    P_VALUE_MIN_EXPECTED,
    hosmer_lemeshow,
    hosmer_lemeshow_from_groups,
)

SEED = 20240614
GROUPS = 10
RISKS = {"Beta(1,20)": (1.0, 20.0), "Beta(2,8)": (2.0, 8.0), "Beta(5,5)": (5.0, 5.0)}
SIZES = (200, 2_000, 20_000)
SMALL_CELLS = (("Beta(5,5)", 1_000), ("Beta(2,8)", 4_000), ("Beta(1,20)", 2_000))


@dataclass(frozen=True)
class Row:
    risk: str
    n: int
    reps: int
    median_min_expected: float
    with_p: int  # windows where the served p_value exists
    dev_05: int  # rejections by χ²_{g−2}, all windows
    dev_01: int
    ext_05: int  # rejections by χ²_g, all windows (floor off)
    ext_01: int
    served_05: int  # rejections by the served p_value, among the with_p windows
    served_01: int
    groups_path_served_05: int  # the same count from hosmer_lemeshow_from_groups
    groups_path_served_01: int
    max_abs_diff_groups_path: float
    seconds: float


def group_totals(p_sorted: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, ...]:
    """(n_j, O_j, E_j) of ten near-equal runs of the sorted rows, sized like ``np.array_split``."""
    sizes = np.array([len(part) for part in np.array_split(p_sorted, GROUPS)], dtype=float)
    starts = np.concatenate([[0], np.cumsum(sizes[:-1])]).astype(np.intp)
    return sizes, np.add.reduceat(y, starts), np.add.reduceat(p_sorted, starts)


def run_cell(risk: str, n: int, reps: int, cell: int) -> Row:
    a, b = RISKS[risk]
    rng = np.random.default_rng([SEED, cell])
    start = time.perf_counter()
    stat = np.empty(reps)
    min_exp = np.empty(reps)
    served = np.full(reps, np.nan)
    served_groups = np.full(reps, np.nan)
    diff = 0.0
    for r in range(reps):
        # the rows are exchangeable, so sorting p changes nothing but the cost of grouping
        p = np.sort(rng.beta(a, b, n))
        y = (rng.random(n) < p).astype(np.float64)
        h = hosmer_lemeshow(y, p, n_bins=GROUPS, min_expected=0.0)
        hg = hosmer_lemeshow_from_groups(*group_totals(p, y), min_expected=0.0)
        if h.statistic is None or hg.statistic is None:
            raise RuntimeError(f"{risk} n={n}: no statistic ({h.reason or hg.reason})")
        stat[r], min_exp[r] = h.statistic, h.min_expected
        diff = max(diff, abs(h.statistic - hg.statistic))
        if h.p_value is not None:
            served[r] = h.p_value
        if hg.p_value is not None:
            served_groups[r] = hg.p_value
    p_dev = stats.chi2.sf(stat, GROUPS - 2)
    p_ext = stats.chi2.sf(stat, GROUPS)
    has_p = ~np.isnan(served)

    def count(pv: np.ndarray, alpha: float) -> int:
        return int(np.sum(pv[~np.isnan(pv)] < alpha))

    return Row(risk, n, reps, float(np.median(min_exp)), int(has_p.sum()),
               count(p_dev, 0.05), count(p_dev, 0.01), count(p_ext, 0.05), count(p_ext, 0.01),
               count(served, 0.05), count(served, 0.01),
               count(served_groups, 0.05), count(served_groups, 0.01),
               diff, time.perf_counter() - start)


def run(small: bool = False) -> list[Row]:
    cells = list(SMALL_CELLS) if small else [(r, n) for r in RISKS for n in SIZES]
    reps = 2_000 if small else 5_000
    return [run_cell(risk, n, reps, i) for i, (risk, n) in enumerate(cells)]


def _pct(k: int, m: int) -> str:
    return f"{100 * k / m:5.2f}" if m else "   — "


def print_table(rows: list[Row]) -> None:
    print(f"Null rejection (%) of Hosmer–Lemeshow, g = {GROUPS} equal-count groups, "
          f"calibrated y ~ Bernoulli(p); p-value served when every group has "
          f">= {P_VALUE_MIN_EXPECTED:g} expected events and non-events")
    head = (f"{'risk':<11}{'n':>7}{'reps':>6}{'med minE':>9}{'with p':>8} | "
            f"{'g-2 5%':>7}{'1%':>6} | {'g 5%':>6}{'1%':>6} | {'served 5%':>9}{'1%':>6} | "
            f"{'groups path 5%':>14}{'1%':>6}{'max|dC|':>9}{'s':>6}")
    print(head)
    print("-" * len(head))
    for r in rows:
        print(f"{r.risk:<11}{r.n:>7}{r.reps:>6}{r.median_min_expected:>9.2f}{r.with_p:>8} | "
              f"{_pct(r.dev_05, r.reps):>7}{_pct(r.dev_01, r.reps):>6} | "
              f"{_pct(r.ext_05, r.reps):>6}{_pct(r.ext_01, r.reps):>6} | "
              f"{_pct(r.served_05, r.with_p):>9}{_pct(r.served_01, r.with_p):>6} | "
              f"{_pct(r.groups_path_served_05, r.with_p):>14}"
              f"{_pct(r.groups_path_served_01, r.with_p):>6}"
              f"{r.max_abs_diff_groups_path:>9.1e}{r.seconds:>6.1f}")
    reps = rows[0].reps
    print(f"Monte-Carlo SE over {reps} windows: "
          f"{100 * math.sqrt(0.05 * 0.95 / reps):.2f} at 5 %, "
          f"{100 * math.sqrt(0.01 * 0.99 / reps):.2f} at 1 % (larger where 'with p' < reps)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help="three cells, 2,000 windows each")
    args = parser.parse_args()
    start = time.perf_counter()
    print_table(run(small=args.small))
    print(f"total {time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
