"""Honesty benchmark of the chart rules: false-alarm rate against the design, detection delays and misses.

For several risk mixes, the service's chart design (``alarms.charts.design_for``:
Markov chain of Brook & Evans 1972 on the stream's own risks) is made for a
target in-control ARL0; in-control streams (y ~ Bernoulli(p)) are then run
with a restart after every signal, as a person resolving each alarm would,
and the observed false alarms per case are compared with 1/ARL0 (goal: within
±20 %). Detection: for an odds doubling (q = 2p/(1 + p), Steiner et al. 2000)
and a slope change (logit q = 0.7 logit p), the mean number of cases from the
change to the first signal after it, among the runs that signal within a
horizon of ``--miss-weeks`` weeks at the stated weekly volume, and the share of
runs that never signal within it (the miss share). A run whose chart signals
before the change is a false alarm, left out of both and counted apart.

The weekly degradation rule (excess log-loss) is measured on the same mixes and
shifts by its own decision (``kinds.spec("excess_log_loss").decide``) on each
simulated week's summary, with no reference (the week is compared with
calibration), at the per-test level ``alarms.budget`` gives it on a model with
the default rules and one stream: its in-control weekly false alarms against
level × weeks (at most; its effect floor makes it fewer), its delay to the end
of the first firing week and its miss share within the same horizon.

Every delay is shown in cases and in weeks at a stated weekly volume. Run:
``.venv/bin/python -m tests.bench.alarms``.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np
from scipy.special import expit, logit
from tests.bench.null_year_run import default_rules
from tests.bench.null_year_window import SimModel, SimPeriod, SimReferences

from calibrant.alarms.budget import per_test_level
from calibrant.alarms.charts import cases_per_day, design_for
from calibrant.alarms.kinds import spec
from calibrant.alarms.kinds.base import EVALUATIONS_PER_YEAR
from calibrant.alarms.kinds.calibration_chart import ChartParams
from calibrant.stats.cusum import advance, new_chart, reset
from calibrant.stats.summary import Summary

MIXES = {"beta(2,8)": (2, 8), "beta(1,20)": (1, 20), "beta(5,5)": (5, 5)}
NOW = datetime(2026, 1, 1, tzinfo=UTC)

Sampler = Callable[[np.random.Generator, int], np.ndarray]
Shift = Callable[[np.ndarray], np.ndarray]


def design(risks: np.ndarray, r_a: float, arl0: float) -> float:
    """h for ARL0 cases: with one chart, the budget formula's target is rate × 365.25 / share,
    so the share is chosen to make that ``arl0``."""
    params = ChartParams(odds_ratio=r_a, min_design_cases=200, design_sample=max(200, risks.size))
    times = np.arange(risks.size, dtype=np.float64) * 86400.0  # one case a day
    share = cases_per_day(times) * 365.25 / arl0
    return float(design_for(np.vstack([risks, times]), params, 1, NOW, share)["h"])


def count_signals(h: float, r_a: float, p: np.ndarray, y: np.ndarray) -> int:
    state, pos, n = new_chart(h, r_a), 0, 0
    while pos < p.size:
        step = advance(state, p[pos:], y[pos:])
        if step.signal_index is None:
            break
        n += 1
        pos += step.signal_index + 1
        state = reset(step.state)
    return n


@dataclass(frozen=True)
class Detection:
    """Mean delay (cases) of the runs that signal within the horizon; their miss share; early signals."""

    mean_delay: float
    missed: int
    early: int
    runs: int

    @property
    def miss_share(self) -> float:
        judged = self.runs - self.early
        return self.missed / judged if judged else float("nan")


def delay(h: float, r_a: float, sampler: Sampler, shift: Shift, rng: np.random.Generator, runs: int,
          horizon: int, tau: int = 500) -> Detection:
    """Cases from the change at case ``tau`` to the first signal, within ``horizon`` cases after it."""
    delays, missed, early = [], 0, 0
    for _ in range(runs):
        p = sampler(rng, tau + horizon)
        q = p.copy()
        q[tau:] = shift(p[tau:])
        y = (rng.random(p.size) < q).astype(float)
        step = advance(new_chart(h, r_a), p, y)
        if step.signal_index is None:
            missed += 1
        elif step.signal_index < tau:
            early += 1
        else:
            delays.append(step.signal_index - tau + 1)
    return Detection(float(np.mean(delays)) if delays else float("nan"), missed, early, runs)


# ----------------------------------------------------------------------------- the weekly rule
WEEKLY_MODEL = SimModel(implicit_negatives=False, outcome_horizon_days=0.0, outcome_lag_days=0.0)
NO_REFERENCE = SimReferences(scores=None, log_loss_sums=None)


def weekly_level() -> float:
    """The excess log-loss rule's per-test level on a one-stream model with the default rules."""
    share = next(r.share for r in default_rules(1.0) if r.kind == "excess_log_loss")
    assert share is not None
    return per_test_level(share, EVALUATIONS_PER_YEAR["week"], 1)


def week_fires(p: np.ndarray, q: np.ndarray, rng: np.random.Generator, level: float) -> bool:
    """One week with scores p and true risks q, judged by the kind's own decision."""
    kind = spec("excess_log_loss")
    y = (rng.random(p.size) < q).astype(np.int8)
    period = SimPeriod(Summary.from_arrays(p, y), 0.0, 7.0, WEEKLY_MODEL, NO_REFERENCE)
    return bool(kind.decide(kind.params.model_validate({}), period, level).crossed)


def weekly_false_alarms(sampler: Sampler, rng: np.random.Generator, weeks: int, volume: int,
                        level: float) -> int:
    return sum(week_fires(p, p, rng, level) for p in (sampler(rng, volume) for _ in range(weeks)))


def weekly_delay(sampler: Sampler, shift: Shift, rng: np.random.Generator, runs: int, volume: int,
                 max_weeks: int, level: float) -> Detection:
    """Cases from a change at a uniformly random case of week 0 to the end of the first firing week."""
    delays, missed = [], 0
    for _ in range(runs):
        change = int(rng.integers(0, volume))
        for week in range(max_weeks):
            p = sampler(rng, volume)
            q = shift(p)
            if week == 0:
                q[:change] = p[:change]
            if week_fires(p, q, rng, level):
                delays.append((week + 1) * volume - change)
                break
        else:
            missed += 1
    return Detection(float(np.mean(delays)) if delays else float("nan"), missed, 0, runs)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--arl0", type=float, default=2000.0)
    ap.add_argument("--cases", type=int, default=400_000)
    ap.add_argument("--runs", type=int, default=300)
    ap.add_argument("--weekly-volume", type=int, default=2000, help="cases per week")
    ap.add_argument("--weeks", type=int, default=2000, help="in-control weeks for the weekly rule")
    ap.add_argument("--weekly-runs", type=int, default=100, help="shifted runs for the weekly rule")
    ap.add_argument("--miss-weeks", type=int, default=12, help="detection horizon for the miss share")
    args = ap.parse_args()
    rng = np.random.default_rng(20261202)
    v = args.weekly_volume
    horizon = args.miss_weeks * v
    level = weekly_level()
    print(f"target ARL0 {args.arl0:g} cases; {args.cases} in-control cases per chart; weekly rule: "
          f"{args.weeks} in-control weeks of {v} cases at its one-stream budget level {level:.3g}, "
          "no reference")
    print(f"delays: mean cases from the change (lower chart: odds halved) among runs that signal within "
          f"{args.miss_weeks} weeks ({horizon} cases), in weeks at {v} cases a week; miss: share of runs "
          f"without a signal within that horizon ({args.runs} chart runs, {args.weekly_runs} weekly runs)")
    print("| mix | rule | h / level | false alarms | expected | ratio | delay odds x2 | miss | "
          "delay slope 0.7 | miss |")
    print("|---|---|---|---|---|---|---|---|---|---|")

    def cells(d: Detection) -> str:
        text = "never" if np.isnan(d.mean_delay) else f"{d.mean_delay:.0f} ({d.mean_delay / v:.2f} wk)"
        early = f", {d.early} early" if d.early else ""
        return f"{text} | {d.miss_share:.1%}{early}"

    for name, (a, b) in MIXES.items():
        def sampler(g: np.random.Generator, n: int, a: float = a, b: float = b) -> np.ndarray:
            return g.beta(a, b, n)
        for label, r_a in (("upper", 2.0), ("lower", 0.5)):
            h = design(sampler(rng, 5000), r_a, args.arl0)
            p = sampler(rng, args.cases)
            y = (rng.random(p.size) < p).astype(float)
            fa = count_signals(h, r_a, p, y)
            expected = args.cases / args.arl0
            odds = 2.0 if r_a > 1 else 0.5
            d_odds = delay(h, r_a, sampler, lambda q, o=odds: o * q / (1 - q + o * q), rng, args.runs,
                           horizon)
            d_slope = delay(h, r_a, sampler, lambda q: expit(0.7 * logit(q)), rng, args.runs, horizon)
            print(f"| {name} | {label} chart | {h:.3f} | {fa} | {expected:.1f} | {fa / expected:.2f} | "
                  f"{cells(d_odds)} | {cells(d_slope)} |")
        fa = weekly_false_alarms(sampler, rng, args.weeks, v, level)
        bound = level * args.weeks
        d_odds = weekly_delay(sampler, lambda q: 2 * q / (1 + q), rng, args.weekly_runs, v, args.miss_weeks,
                              level)
        d_slope = weekly_delay(sampler, lambda q: expit(0.7 * logit(q)), rng, args.weekly_runs, v,
                               args.miss_weeks, level)
        print(f"| {name} | weekly excess log-loss | {level:.3g} | {fa} | ≤ {bound:.1f} | {fa / bound:.2f} | "
              f"{cells(d_odds)} | {cells(d_slope)} |")


if __name__ == "__main__":
    main()
