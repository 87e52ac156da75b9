"""Coverage of every 95 % interval a metrics period reports, by Monte Carlo.

    python -m tests.bench.coverage                    # the full table: 2,000 replicates a cell
    python -m tests.bench.coverage --replicates 300   # quicker, wider Monte Carlo error

Cells: truth (calibrated; slope 0.7: logit q = 0.7 logit p; odds × 2: logit q = logit p + ln 2)
× risk mix (p ~ Beta(1, 20), Beta(2, 8)) × n (200, 2,000). Each replicate draws n cases,
builds the mergeable summary and computes the period's metrics exactly as the API does
(``all_metrics`` then the registry floors, ``rollup.query.apply_floors``). The target of each
interval is the period's population value (docs/methods.md §20.2), computed by numerical
integration over the risk mix with scipy (``integrate.quad``, ``optimize.brentq`` / ``fsolve``).

Coverage is counted over the replicates that report an interval (a replicate below the
metric's floor reports none); the table gives that share, the coverage and its Monte Carlo
standard error sqrt(c(1 − c)/m). A cell is ``ok`` when its coverage lies in [93 %, 98.5 %];
it is ``below floor`` when its expected events n·E[q] or non-events fall short of the
metric's registry floor (then most replicates report no interval, and the few that reach the
floor by chance are a selected sample; their coverage is printed, not judged).
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import integrate, optimize, stats
from scipy.special import expit, logit

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from calibrant.rollup.query import apply_floors
from calibrant.stats.summary import Summary
from calibrant.stats.summary_metrics import all_metrics
from calibrant.vocabulary.metrics import BY_KEY

TRUTHS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "calibrated": lambda x: x,
    "slope_0.7": lambda x: 0.7 * x,
    "odds_x2": lambda x: x + math.log(2.0),
}
MIXES: dict[str, tuple[float, float]] = {"beta_1_20": (1.0, 20.0), "beta_2_8": (2.0, 8.0)}
SIZES = (200, 2000)
KEYS = ("mean_probability", "observed_rate", "oe_ratio", "log_loss", "brier", "calibration_intercept",
        "calibration_slope", "calibration_slope_robust", "auc")
LOW, HIGH = 0.93, 0.985
ROBUST_TAIL = 0.025  # the robust slope clips logits at the 2.5th and 97.5th percentiles


@dataclass(frozen=True)
class Cell:
    truth: str
    mix: str
    n: int


def _expect(mix: str, g: Callable[[float], float]) -> float:
    """E[g(p)] for p ~ the mix's Beta law (scipy quad, split where the density bends)."""
    a, b = MIXES[mix]
    value, _ = integrate.quad(lambda p: g(p) * stats.beta.pdf(p, a, b), 0.0, 1.0, limit=400,
                              points=[1e-8, 1e-5, 1e-3, 0.01, 0.05, 0.1, 0.3], epsabs=1e-13)
    return float(value)


def population(truth: str, mix: str) -> dict[str, float]:
    """Each metric's population value under (truth, mix), by numerical integration."""
    shift = TRUTHS[truth]

    def q(p: float) -> float:
        return float(expit(shift(np.array(logit(p)))))

    a, b = MIXES[mix]
    eq = _expect(mix, q)
    ep = a / (a + b)
    out = {
        "mean_probability": ep,
        "observed_rate": eq,
        "oe_ratio": eq / ep,
        "log_loss": _expect(mix, lambda p: -q(p) * math.log(p) - (1 - q(p)) * math.log1p(-p)),
        "brier": _expect(mix, lambda p: q(p) * (1 - p) ** 2 + (1 - q(p)) * p * p),
        "calibration_intercept": float(optimize.brentq(
            lambda c: _expect(mix, lambda p: float(expit(c + logit(p)))) - eq, -10, 10, xtol=1e-12)),
    }
    out["calibration_slope"] = _population_slope(mix, q, None)
    lo, hi = (float(logit(stats.beta.ppf(t, a, b))) for t in (ROBUST_TAIL, 1 - ROBUST_TAIL))
    out["calibration_slope_robust"] = _population_slope(mix, q, (lo, hi))
    out["auc"] = _population_auc(mix, shift)
    return out


def _population_slope(mix: str, q: Callable[[float], float], clip: tuple[float, float] | None) -> float:
    """β of the population logistic fit of y on x = logit p (x clipped when ``clip``):
    E[(q − expit(α + βx))(1, x)] = 0, solved with scipy fsolve."""
    def x_of(p: float) -> float:
        x = float(logit(p))
        return x if clip is None else min(max(x, clip[0]), clip[1])

    def score(theta: np.ndarray) -> list[float]:
        al, be = theta
        return [_expect(mix, lambda p: q(p) - float(expit(al + be * x_of(p)))),
                _expect(mix, lambda p: (q(p) - float(expit(al + be * x_of(p)))) * x_of(p))]

    return float(optimize.fsolve(score, np.array([0.0, 1.0]), xtol=1e-11)[1])


def _population_auc(mix: str, shift: Callable[[np.ndarray], np.ndarray]) -> float:
    """P(p of an event > p of a non-event) = ∫ f1 F0, on a fine logit grid (scipy trapezoid and
    cumulative_trapezoid); f1 ∝ q f and f0 ∝ (1 − q) f, f the density of x = logit p."""
    a, b = MIXES[mix]
    x = np.linspace(-30.0, 12.0, 400_001)
    p = expit(x)
    dens = stats.beta.pdf(p, a, b) * p * (1 - p)
    q = expit(shift(x))
    f1 = dens * q / integrate.trapezoid(dens * q, x)
    f0 = dens * (1 - q) / integrate.trapezoid(dens * (1 - q), x)
    F0 = integrate.cumulative_trapezoid(f0, x, initial=0.0)
    return float(integrate.trapezoid(f1 * F0, x))


def run_cell(cell: Cell, truth_values: dict[str, float], replicates: int, seed: int,
             keys: tuple[str, ...] = KEYS) -> dict[str, dict[str, float]]:
    """Replicate one cell; per metric: replicates with an interval, covered, coverage, MC SE."""
    a, b = MIXES[cell.mix]
    shift = TRUTHS[cell.truth]
    rng = np.random.default_rng(seed)
    with_ci = dict.fromkeys(keys, 0)
    covered = dict.fromkeys(keys, 0)
    for _ in range(replicates):
        p = rng.beta(a, b, cell.n)
        y = (rng.random(cell.n) < expit(shift(logit(p)))).astype(np.int64)
        summary = Summary.from_arrays(p, y)
        metrics = all_metrics(summary)
        apply_floors(metrics, float(y.sum()), float(cell.n - y.sum()))
        for key in keys:
            ci = metrics[key].ci
            if ci is None:
                continue
            with_ci[key] += 1
            covered[key] += ci[0] <= truth_values[key] <= ci[1]
    out = {}
    for key in keys:
        m = with_ci[key]
        c = covered[key] / m if m else math.nan
        out[key] = {"with_interval": m / replicates, "coverage": c,
                    "mc_se": math.sqrt(c * (1 - c) / m) if m else math.nan, "replicates": m}
    return out


def below_floor(key: str, n: int, event_rate: float) -> bool:
    """Whether the cell's expected counts are under the metric's registry floor."""
    floor = BY_KEY[key].floor
    return floor is not None and not floor.met(n * event_rate, n * (1.0 - event_rate))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=2000)
    parser.add_argument("--seed", type=int, default=20261203)
    args = parser.parse_args()
    print(f"coverage of 95 % intervals, {args.replicates} replicates a cell; target [{LOW:.1%}, {HIGH:.1%}]")
    print(f"{'truth':<11} {'mix':<10} {'n':>5} {'metric':<25} {'with CI':>8} {'coverage':>9} "
          f"{'MC SE':>7}  verdict")
    failures = 0
    t0 = time.perf_counter()
    for k, (truth, mix, n) in enumerate((t, m, n) for t in TRUTHS for m in MIXES for n in SIZES):
        values = population(truth, mix)
        result = run_cell(Cell(truth, mix, n), values, args.replicates, args.seed + k)
        for key, r in result.items():
            under = below_floor(key, n, values["observed_rate"])
            ok = r["replicates"] == 0 or under or LOW <= r["coverage"] <= HIGH
            failures += not ok
            verdict = "below floor" if under else ("ok" if ok else "OUT")
            cov = "—" if r["replicates"] == 0 else f"{r['coverage']:.1%}"
            se = "—" if r["replicates"] == 0 else f"{r['mc_se']:.1%}"
            print(f"{truth:<11} {mix:<10} {n:>5} {key:<25} {r['with_interval']:>8.1%} {cov:>9} {se:>7}  "
                  f"{verdict}", flush=True)
    print(f"{failures} cell(s) outside [{LOW:.1%}, {HIGH:.1%}]; {time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
