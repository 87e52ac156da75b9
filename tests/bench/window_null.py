"""Null rejection of the window tests by simulation: excess log-loss, PSI against no shift, calibration slope.

Every period is drawn under the null: risks p from Beta(1, 20), Beta(2, 8) or
Beta(5, 5), n = 200 or 2,000 cases, and outcomes y ~ Bernoulli(p) (calibrated)
or, for PSI, a current period and a reference of REFERENCE_ROWS predictions from
one risk distribution (no shift). Figures carry Clopper–Pearson 95 % intervals
(``scipy.stats.binomtest``).

1. Excess log-loss at level 0.01, ``alarms.kinds.excess_log_loss.excess_log_loss``
   on each period's sums (no reference: compared with calibration). The sums
   are made for a batch of periods at once with numpy, and checked equal to
   ``stats.window_tests.log_loss_sums`` of ``Summary.from_arrays`` on the first
   periods of every cell. Only periods that pass the kind's data floors count
   (200 labeled, 10 of each class); the share evaluated is printed, and so is
   the rate per period drawn, which is what the false-alarm budget sees (the
   floor on events keeps periods with many events, so the rate among evaluated
   periods can exceed the level while the rate per period does not). Beside the
   saddlepoint p-value: the normal z the rule used before, and the rule's
   crossings (the effect floor added).
2. Excess log-loss at level 1e-4: for one period's risks per cell, the
   saddlepoint's critical value of D (``stats.window_tests.excess_upper_tail``
   on the bins of ``log_loss_sums``) against a large Monte Carlo of
   D = Σ −(y − p)·logit(p) / n on the exact rows, with the normal critical value
   beside it. No floors: this is the tail itself.
3. PSI at levels 0.01 and 1e-4: the score-drift kind's no-shift point
   χ²_{1−α,9}(1/n + 1/m) (``stats.window_tests.psi_no_shift_level``) against PSI
   on reference-decile bins snapped to the fine edges (``stats.summary_drift``).
   The real path, ``summary_drift.psi`` of two summaries and
   ``alarms.kinds.score_drift.drift``, costs milliseconds a period (mostly
   scipy's χ² quantile); the bulk therefore runs a vectorised copy of the same
   arithmetic (fine-bin counts, the snapped deciles, PSI with ½ smoothing),
   checked equal to the real path on the first periods of every cell. A
   reference whose snapped deciles merge goes through the real path. The rule's
   crossings (PSI also above min_psi = 0.1) are printed beside the test.

4. Calibration slope at level 0.01: the plain and the robust slope's two-sided
   Wald tests of slope 1 from each calibrated period's summary, and the slope
   kind's decision (``calibration_slope_decision``), over periods passing its floors.
   Full run (20,000 periods a cell): plain 0.80-1.02 × the level, robust alone
   0.75-1.55 × (winsorising biases it up at 2,000 cases), the rule 0.50-0.73 ×;
   Beta(1,20) at 200 cases is almost never judged (the fit needs 20 events).

Run: ``.venv/bin/python -m tests.bench.window_null`` (about 3 minutes on two
cores), or ``--small`` (under 30 s, what ``test_window_null_small.py`` runs).
"""

from __future__ import annotations

import argparse
import math
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, special, stats

from calibrant.alarms.kinds.calibration_slope import CalibrationSlopeParams, calibration_slope_decision
from calibrant.alarms.kinds.excess_log_loss import ExcessLogLossParams, excess_log_loss
from calibrant.alarms.kinds.score_drift import DriftParams, drift
from calibrant.stats import summary_binned, summary_metrics
from calibrant.stats.summary import EDGES_P, EPS, N_BINS, UNLABELED, Summary, bin_index
from calibrant.stats.summary_drift import frozen_bins, psi
from calibrant.stats.window_tests import (
    LogLossBins,
    LogLossSums,
    excess_upper_tail,
    log_loss_sums,
    psi_no_shift_level,
)

MIXES = {"Beta(1,20)": (1.0, 20.0), "Beta(2,8)": (2.0, 8.0), "Beta(5,5)": (5.0, 5.0)}
SIZES = (200, 2000)
LEVEL = 0.01
SMALL_LEVEL = 1e-4
REFERENCE_ROWS = 5000
DECILES = 10
ELL_PARAMS = ExcessLogLossParams()
SLOPE_PARAMS = CalibrationSlopeParams()
PSI_PARAMS = DriftParams()
_BATCH = 250  # periods drawn at once


@dataclass(frozen=True)
class Scale:
    periods: int  # per cell, at level 0.01
    mc_draws: int  # Monte Carlo draws of D per cell, at 1e-4
    psi_draws: int  # PSI periods per cell, at 1e-4
    checks: int  # periods per cell checked against the real path
    slope_periods: int  # calibration-slope periods per cell, at level 0.01


FULL = Scale(periods=20_000, mc_draws=1_000_000, psi_draws=200_000, checks=200, slope_periods=20_000)
SMALL = Scale(periods=1_000, mc_draws=50_000, psi_draws=10_000, checks=20, slope_periods=300)


@dataclass
class Count:
    """k of n with its Clopper–Pearson 95 % interval."""

    k: int
    n: int

    @property
    def rate(self) -> float:
        return self.k / self.n if self.n else math.nan

    def interval(self) -> tuple[float, float]:
        ci = stats.binomtest(self.k, self.n).proportion_ci(0.95)
        return float(ci.low), float(ci.high)

    def __str__(self) -> str:
        if self.n == 0:
            return "none evaluated"
        lo, hi = self.interval()
        return f"{self.rate:.2e} [{lo:.2e}, {hi:.2e}] ({self.k}/{self.n})"


@dataclass
class Cell:
    test: str
    mix: str
    n: int
    figures: dict[str, Count | float] = field(default_factory=dict)


# ---------------------------------------------------------------- excess log-loss, level 0.01
def batch_sums(p: np.ndarray, y: np.ndarray) -> list[LogLossSums]:
    """``LogLossSums`` (with fine bins) of each row of p, y at once, with the summary's per-row fields."""
    k, n = p.shape
    pc = np.clip(p, EPS, 1 - EPS)
    x = special.logit(pc)
    loss = -np.log1p(-pc) - y * x
    entropy = special.entr(p) + special.entr(1 - p)
    v = p * (1 - p) * x * x
    key = (np.arange(k)[:, None] * N_BINS + bin_index(p)).ravel()
    count = np.bincount(key, minlength=k * N_BINS).reshape(k, N_BINS)
    sp = np.bincount(key, p.ravel(), minlength=k * N_BINS).reshape(k, N_BINS)
    sx = np.bincount(key, x.ravel(), minlength=k * N_BINS).reshape(k, N_BINS)
    out = []
    for i in range(k):
        nz = count[i] > 0
        c = count[i, nz].astype(float)
        out.append(LogLossSums(n=float(n), n1=float(y[i].sum()), sl=float(loss[i].sum()),
                               sh=float(entropy[i].sum()), sv=float(v[i].sum()),
                               bins=LogLossBins(count=c, mean_p=sp[i, nz] / c, mean_x=sx[i, nz] / c)))
    return out


def _check_sums(mine: LogLossSums, p: np.ndarray, y: np.ndarray) -> None:
    real = log_loss_sums(Summary.from_arrays(p, y.astype(int)), False)
    for name in ("n", "n1", "sl", "sh", "sv"):
        assert math.isclose(getattr(mine, name), getattr(real, name), rel_tol=1e-9, abs_tol=1e-9), name
    assert mine.bins is not None
    assert real.bins is not None
    np.testing.assert_array_equal(mine.bins.count, real.bins.count)
    np.testing.assert_allclose(mine.bins.mean_p, real.bins.mean_p, rtol=1e-9)
    np.testing.assert_allclose(mine.bins.mean_x, real.bins.mean_x, rtol=1e-9, atol=1e-12)


def excess_null(mix: str, n: int, periods: int, checks: int, seed: int) -> Cell:
    a, b = MIXES[mix]
    rng = np.random.default_rng(seed)
    evaluated = rejected = normal = crossed = 0
    done = 0
    while done < periods:
        k = min(_BATCH, periods - done)
        p = rng.beta(a, b, (k, n))
        y = (rng.random((k, n)) < p).astype(float)
        for i, sums in enumerate(batch_sums(p, y)):
            if done + i < checks:
                _check_sums(sums, p[i], y[i])
            verdict = excess_log_loss(sums, None, ELL_PARAMS, LEVEL)
            if verdict.crossed is None:
                continue
            evaluated += 1
            rejected += verdict.detail["p_value"] <= LEVEL
            normal += verdict.detail["z"] > verdict.detail["z_critical"]
            crossed += verdict.crossed
        done += k
    return Cell("excess", mix, n, {
        "evaluated": Count(evaluated, periods), "saddlepoint": Count(rejected, evaluated),
        "normal z": Count(normal, evaluated), "rule": Count(crossed, evaluated),
        "saddlepoint per period": Count(rejected, periods)})


# ---------------------------------------------------------------- calibration slope, level 0.01
def slope_null(mix: str, n: int, periods: int, seed: int) -> Cell:
    """The slope kind's two Wald tests of β = 1 and its rule, on calibrated periods from the summary.

    Plain slope: ``summary_binned.logistic_recalibration``; robust slope:
    ``summary_metrics.calibration_slope_robust``; the rule:
    ``kinds.calibration_slope.calibration_slope_decision`` at LEVEL. Counted over
    periods that pass the kind's floors (200 labeled, 10 of each class) and whose
    fits give a value; the Wald tests are two-sided, z_{1−α/2} from scipy.
    """
    a, b = MIXES[mix]
    rng = np.random.default_rng(seed)
    z_c = float(stats.norm.ppf(1 - LEVEL / 2))
    evaluated = plain_rejects = robust_rejects = crossed = 0
    for _ in range(periods):
        p = rng.beta(a, b, n)
        y = (rng.random(n) < p).astype(np.int8)
        n1 = int(y.sum())
        if n < SLOPE_PARAMS.min_labeled or min(n1, n - n1) < SLOPE_PARAMS.min_per_class:
            continue
        v = Summary.from_arrays(p, y).labeled(False)
        plain = summary_binned.logistic_recalibration(v).slope
        robust = summary_metrics.calibration_slope_robust(v)
        if plain.value is None or robust.value is None or not plain.se or not robust.se:
            continue
        evaluated += 1
        plain_rejects += abs(plain.value - 1) / plain.se > z_c
        robust_rejects += abs(robust.value - 1) / robust.se > z_c
        verdict = calibration_slope_decision(plain, robust, n=n, n1=n1, n_clipped=0, n_confident_errors=0,
                                             params=SLOPE_PARAMS, level=LEVEL)
        crossed += bool(verdict.crossed)
    return Cell("slope", mix, n, {
        "evaluated": Count(evaluated, periods), "plain Wald": Count(plain_rejects, evaluated),
        "robust Wald": Count(robust_rejects, evaluated), "rule": Count(crossed, evaluated)})


# ---------------------------------------------------------------- excess log-loss, level 1e-4
def excess_tail(mix: str, n: int, draws: int, seed: int) -> Cell:
    a, b = MIXES[mix]
    rng = np.random.default_rng(seed)
    p = rng.beta(a, b, n)
    sums = log_loss_sums(Summary.from_arrays(p, np.zeros(n, int)), False)
    assert sums.bins is not None
    cells = [(sums.bins, 1.0 / n)]
    x = special.logit(np.clip(p, EPS, 1 - EPS))
    top = float(np.sum(np.where(x < 0, -(1 - p) * x, p * x))) / n  # the largest attainable D
    critical = optimize.brentq(lambda d: excess_upper_tail(cells, 0.0, d) - SMALL_LEVEL, 0.0, top)
    normal_critical = float(stats.norm.isf(SMALL_LEVEL)) * math.sqrt(sums.sv) / n
    centre = float(np.sum(p * x))
    hits = normal_hits = 0
    chunk = max(1, 10_000_000 // n)
    done = 0
    while done < draws:
        k = min(chunk, draws - done)
        d = (centre - (rng.random((k, n)) < p).astype(np.float64) @ x) / n
        hits += int(np.sum(d >= critical))
        normal_hits += int(np.sum(d >= normal_critical))
        done += k
    return Cell("excess 1e-4", mix, n, {"saddlepoint": Count(hits, draws),
                                        "normal z": Count(normal_hits, draws)})


# ---------------------------------------------------------------- PSI
def _fine_mass(mix: str) -> np.ndarray:
    a, b = MIXES[mix]
    cdf = stats.beta.cdf(EDGES_P, a, b)
    return np.diff(np.concatenate([[0.0], cdf, [1.0]]))


def _unit_summary() -> Summary:
    """One prediction inside every fine bin (its middle), unlabeled: scaled by counts it is the
    summary of any sample whose fine-bin counts are those counts (PSI reads nothing else)."""
    middle = np.empty(N_BINS)
    middle[0] = EDGES_P[0] / 2
    middle[1:-1] = (EDGES_P[:-1] + EDGES_P[1:]) / 2
    middle[-1] = (EDGES_P[-1] + 1) / 2
    unit = Summary.from_arrays(middle, np.full(N_BINS, UNLABELED))
    assert np.array_equal(unit.cells // 3, np.arange(N_BINS))
    return unit


def _summary(unit: Summary, counts: np.ndarray) -> Summary:
    keep = counts > 0
    return Summary(unit.cells[keep], unit.fields[keep] * counts[keep, None])


def _snapped(ref: np.ndarray, mass: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row of fine counts: the last fine bin of each of the first B − 1 coarse bins, as
    ``summary_drift.frozen_bins`` picks them (first argmin of |share − k/B|), and whether two
    deciles snapped to one edge.

    The argmin is taken over a window of columns around where the population share crosses
    k/B (±10 binomial SD). Shares rise along a row, so |share − k/B| falls then rises; when the
    window's first share is below k/B, its last one at or above, and the argmin is not the
    window's first column, the window's argmin is the row's. Rows that miss any of these are
    taken over the whole row.
    """
    total = ref.sum(axis=1, keepdims=True)
    share = np.cumsum(ref, axis=1)[:, :-1] / total
    population = np.cumsum(mass)[:-1]
    width = share.shape[1]
    last = np.empty((ref.shape[0], DECILES - 1), dtype=np.int64)
    for j, t in enumerate(np.arange(1, DECILES) / DECILES):
        spread = 10.0 * math.sqrt(t * (1 - t) / REFERENCE_ROWS)
        a = max(0, int(np.searchsorted(population, t - spread, side="left")) - 2)
        b = min(width - 1, int(np.searchsorted(population, t + spread, side="right")) + 2)
        window = share[:, a:b + 1]
        pick = a + np.abs(window - t).argmin(axis=1)
        unsure = (share[:, a] >= t) | (share[:, b] < t) | (pick == a)
        if np.any(unsure):
            pick[unsure] = np.abs(share[unsure] - t).argmin(axis=1)
        last[:, j] = pick
    return last, np.any(np.diff(last, axis=1) <= 0, axis=1)


def _coarse(cum: np.ndarray, last: np.ndarray) -> np.ndarray:
    """Coarse-bin totals from inclusive cumulative fine totals ``cum`` at the snapped edges."""
    at = np.take_along_axis(cum, last, axis=1)
    inner = np.diff(at, axis=1)
    return np.concatenate([at[:, :1], inner, cum[:, -1:] - at[:, -1:]], axis=1)


def _psi_rows(r: np.ndarray, c: np.ndarray, smoothing: float = 0.5) -> np.ndarray:
    """``stats.drift`` PSI with ½ added to every count, row by row."""
    a = (c + smoothing) / (c + smoothing).sum(axis=1, keepdims=True)
    e = (r + smoothing) / (r + smoothing).sum(axis=1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = (a - e) * np.log(a / e)
    return np.sum(np.where(a == e, 0.0, terms), axis=1)


def _draw_current(rng: np.random.Generator, n: int, prob: np.ndarray) -> np.ndarray:
    """Multinomial(n, prob) per row (each row its own probabilities) by successive binomials."""
    out = np.zeros(prob.shape)
    left = np.full(prob.shape[0], float(n))
    rest = np.ones(prob.shape[0])
    for j in range(prob.shape[1] - 1):
        share = np.clip(np.divide(prob[:, j], rest, out=np.zeros_like(rest), where=rest > 0), 0.0, 1.0)
        out[:, j] = rng.binomial(left.astype(np.int64), share)
        left -= out[:, j]
        rest -= prob[:, j]
    out[:, -1] = left
    return out


def _real_psi(unit: Summary, ref: np.ndarray, cur: np.ndarray, level: float) -> tuple[float, float, bool]:
    """PSI, the no-shift point and the rule's verdict by the service's own path."""
    est = psi(_summary(unit, cur), _summary(unit, ref))
    verdict = drift(est, PSI_PARAMS, level)
    assert est.value is not None
    assert verdict.crossed is not None
    return float(est.value), float(verdict.detail["null_level"]), bool(verdict.crossed)


def psi_null(mix: str, n: int, periods: int, checks: int, seed: int, level: float) -> Cell:
    rng = np.random.default_rng(seed)
    mass = _fine_mass(mix)
    unit = _unit_summary()
    for _ in range(checks):  # the copy against the real path, current drawn on the fine bins
        ref, cur = rng.multinomial(REFERENCE_ROWS, mass), rng.multinomial(n, mass)
        value, null, verdict = _real_psi(unit, ref, cur, level)
        last, merged = _snapped(ref[None, :].astype(float), mass)
        assert not merged[0]
        assert frozen_bins(_summary(unit, ref)).starts == (0, *(int(i) + 1 for i in last[0]))
        copy = _psi_rows(_coarse(np.cumsum(ref)[None, :].astype(float), last),
                         _coarse(np.cumsum(cur)[None, :].astype(float), last))[0]
        assert math.isclose(copy, value, rel_tol=1e-12, abs_tol=1e-15), (copy, value)
        assert null == psi_no_shift_level(level, DECILES, REFERENCE_ROWS, n)
        assert verdict == (copy > max(null, PSI_PARAMS.min_psi))
    null = psi_no_shift_level(level, DECILES, REFERENCE_ROWS, n)
    cum_mass = np.cumsum(mass)[None, :]
    rejected = crossed = merged_total = done = 0
    chunk = 10_000
    while done < periods:
        k = min(chunk, periods - done)
        ref = rng.multinomial(REFERENCE_ROWS, mass, size=k).astype(float)
        last, merged = _snapped(ref, mass)
        prob = _coarse(np.broadcast_to(cum_mass, (k, N_BINS)), last)
        cur = _draw_current(rng, n, prob)
        values = _psi_rows(_coarse(np.cumsum(ref, axis=1), last), cur)
        ok = ~merged
        rejected += int(np.sum(values[ok] > null))
        crossed += int(np.sum(values[ok] > max(null, PSI_PARAMS.min_psi)))
        for i in np.flatnonzero(merged):  # fewer than ten bins: the real path on fine current counts
            fine_cur = rng.multinomial(n, mass)
            value, point, verdict = _real_psi(unit, ref[i].astype(np.int64), fine_cur, level)
            rejected += value > point
            crossed += verdict
        merged_total += int(np.sum(merged))
        done += k
    return Cell(f"psi {level:g}", mix, n, {"test": Count(rejected, periods), "rule": Count(crossed, periods),
                                           "merged deciles": float(merged_total), "no-shift point": null})


# ---------------------------------------------------------------- running and printing
def jobs(scale: Scale) -> list[tuple]:
    out: list[tuple] = []
    seed = 1000
    for mix in MIXES:
        for n in SIZES:
            seed += 10
            out.append((excess_null, mix, n, scale.periods, scale.checks, seed))
            out.append((excess_tail, mix, n, scale.mc_draws, seed + 1))
            out.append((psi_null, mix, n, scale.periods, scale.checks, seed + 2, LEVEL))
            out.append((psi_null, mix, n, scale.psi_draws, scale.checks, seed + 3, SMALL_LEVEL))
            out.append((slope_null, mix, n, scale.slope_periods, seed + 4))
    return out


def _run(job: tuple) -> Cell:
    return job[0](*job[1:])


def run(scale: Scale, workers: int = 1) -> list[Cell]:
    todo = jobs(scale)
    if workers <= 1:
        return [_run(j) for j in todo]
    with ProcessPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(_run, todo))


def report(cells: list[Cell]) -> None:
    sections = [
        ("excess", (f"Excess log-loss at level {LEVEL:g} "
                    "(evaluated periods; 'per period': over all periods drawn)")),
        ("excess 1e-4", (f"Excess log-loss tail at {SMALL_LEVEL:g}: Monte Carlo rate beyond each "
                         "critical value (one period's risks per cell)")),
        (f"psi {LEVEL:g}", f"PSI at level {LEVEL:g} (reference {REFERENCE_ROWS} predictions, deciles)"),
        (f"psi {SMALL_LEVEL:g}", f"PSI at level {SMALL_LEVEL:g}"),
        ("slope", (f"Calibration slope at level {LEVEL:g}: the plain and robust Wald tests of slope 1, "
                   "and the rule (both tests, both slopes beyond the 0.8/1.2 floors on one side)")),
    ]
    for test, title in sections:
        print(f"\n{title}")
        for cell in (c for c in cells if c.test == test):
            parts = []
            for name, value in cell.figures.items():
                if isinstance(value, Count):
                    text = f"{value.rate:.1%} ({value.k}/{value.n})" if name == "evaluated" else str(value)
                else:
                    text = f"{value:.4g}"
                parts.append(f"{name} {text}")
            print(f"  {cell.mix:<10} n={cell.n:<5} " + "; ".join(parts))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help="CI size: under 30 s")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    started = time.perf_counter()
    cells = run(SMALL if args.small else FULL, workers=args.workers)
    report(cells)
    print(f"\n{time.perf_counter() - started:.0f} s")


if __name__ == "__main__":
    main()
