"""Benchmark: CUSUM limit design time and Markov-vs-simulation agreement.

    python tests/bench/cusum.py [--small]

Prints, for a few risk mixes and both charts (R_A = 2 and ½), the time to
design h for targets 1e4 … 1e7 cases, the chain's accuracy check (relative
ARL0 change between m and 2m states), and at target 1e4 the ratio of the
simulated ARL0 at the designed h to the Markov ARL0, with its Monte-Carlo SE.
Timing is printed, never asserted.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass

import numpy as np

from calibrant.stats.cusum_design import design_cusum
from calibrant.stats.cusum_simulation import simulated_arl

SEED = 20240613


def risk_mixes(n: int) -> dict[str, np.ndarray]:
    """Risk samples of different shapes, drawn once from a fixed seed."""
    rng = np.random.default_rng(SEED)
    return {
        "beta(2,8) mean 0.20": rng.beta(2, 8, n),
        "beta(1,60) mean 0.016": rng.beta(1, 60, n),
        "logit-normal(-1,1.2)": 1 / (1 + np.exp(-rng.normal(-1.0, 1.2, n))),
        "beta(0.5,0.5) mean 0.5": rng.beta(0.5, 0.5, n),
    }


@dataclass(frozen=True)
class Row:
    mix: str
    r_a: float
    target: float
    h: float
    design_ms: float
    discretisation_change: float
    sim_ratio: float | None = None
    sim_ratio_se: float | None = None


def run(small: bool = False) -> list[Row]:
    mixes = risk_mixes(5_000 if small else 200_000)
    if small:
        mixes = dict(list(mixes.items())[:2])
    targets = (1e4, 1e5) if small else (1e4, 1e5, 1e6, 1e7)
    n_paths = 400 if small else 2000
    rows = []
    for name, risks in mixes.items():
        for r_a in (2.0, 0.5):
            for target in targets:
                start = time.perf_counter()
                design = design_cusum(risks, target, r_a)
                ms = (time.perf_counter() - start) * 1e3
                ratio = ratio_se = None
                if target == 1e4:
                    sim = simulated_arl(risks, r_a, design.h, n_paths=n_paths, seed=SEED)
                    ratio = sim.mean / design.achieved_arl0
                    ratio_se = sim.se / design.achieved_arl0
                rows.append(
                    Row(
                        name,
                        r_a,
                        target,
                        design.h,
                        ms,
                        design.discretisation_change,
                        ratio,
                        ratio_se,
                    )
                )
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help="quick run for CI")
    args = parser.parse_args()
    print(f"{'risk mix':24} {'R_A':>4} {'target':>8} {'h':>8} {'ms':>7} {'m/2m':>7}  sim/markov")
    for r in run(args.small):
        sim = "" if r.sim_ratio is None else f"{r.sim_ratio:.3f} ± {r.sim_ratio_se:.3f}"
        print(
            f"{r.mix:24} {r.r_a:4g} {r.target:8.0e} {r.h:8.4f} {r.design_ms:7.1f} "
            f"{r.discretisation_change:7.2%}  {sim}"
        )


if __name__ == "__main__":
    main()
