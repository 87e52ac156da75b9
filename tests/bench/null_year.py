"""False alarms of a model's default rules over simulated well-calibrated model-years, and their power.

    .venv/bin/python -m tests.bench.null_year [--small] [--years N] [--runs R] [--seed S] [--workers W]

A. Null years. Each simulated model-year is well calibrated (y ~ Bernoulli(p)
exactly) and its feeds healthy; it cycles through three risk mixes
(Beta(1,20), Beta(2,8), Beta(5,5)) and both outcome processes (explicit
outcomes after a lognormal delay; implicit negatives), with a base volume
log-uniform in 1,000-4,000 cases a week and ±25 % seasonality, one segment key
with three values (1/2, 1/3, 1/6 of the traffic), an extreme prediction
(p = 1e-9 or 1 − 1e-9, outcome drawn from p) about every third week, and a
second version shadow-scoring from mid-year (``null_year_traffic``). A
traffic reference of 8 weeks precedes the 52 judged weeks. Every default rule
(``alarms.kinds.DEFAULT_RULES``) is judged by its own decision code at the
share of a budget of 1 false alarm a year that ``alarms.budget.split`` gives
it (``null_year_run``). A false alarm is an alarm opening. Printed: false
alarms per model-year with a 95 % bootstrap interval over years, P(at least
one in a year), the count of each rule against its share, and the same split
by risk mix and by outcome process. Goal: upper 95 % bound ≤ 1.3 a model-year.
The three segment values share the year's risk mix: the rules compare every
stream with the one model-wide reference, so segments of different mixes
would make score drift fire on a stable model, which this bench does not
measure.

B. Power. Beta(2,8) risks, 2,000 cases a week, explicit outcomes (horizon 10
days, lag 1, lognormal delay of median 2 days); from day 84 the odds of every
case of segment value "b" (a third of the traffic) are multiplied by 2 (or
1.5). The delay is from the shift to the first alarm opening on a stream that
holds those cases (version 0, "all" or region=b), in days from when the first
affected cases were scored and from when they matured (H + L later); a run
that raises none within 12 weeks is a miss. The feed rule is left out (it
cannot see an odds shift). Goal: odds × 2 found within 3 weeks in ≥ 90 % of runs.

C. The wall time is printed, and the CPU time the runs took (on a shared
machine the wall time says little; CPU / 2 is the wall time on two idle
cores). Nothing is asserted here (tests/bench/test_null_year_small.py asserts
the small run).
"""

from __future__ import annotations

import argparse
import math
import multiprocessing
import os
import time
from collections import Counter
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field

import numpy as np
from tests.bench.null_year_charts import DesignTable
from tests.bench.null_year_run import ALL, Opening, Rule, RunResult, Timeline, default_rules, run
from tests.bench.null_year_traffic import (
    EXPLICIT,
    IMPLICIT,
    MIXES,
    SEGMENT_KEY,
    SEGMENT_VALUES,
    Shift,
    YearSpec,
)
from threadpoolctl import threadpool_limits

BUDGET = 1.0
REFERENCE_WEEKS = 8
JUDGED_WEEKS = 52
SHIFT_DAY = 84.0  # four weeks after the reference: every chart is designed and running
POWER_WEEKS = 12
GOAL_UPPER = 1.3
GOAL_DETECT_DAYS = 21.0
GOAL_DETECT_SHARE = 0.9
BOOTSTRAP = 10_000


# ----------------------------------------------------------------------------- tasks
def null_specs(years: int, seed: int) -> list[YearSpec]:
    """Year i: mix i mod 3, explicit outcomes for i mod 6 < 3, else implicit negatives; volume and
    season phase drawn from ``seed``."""
    rng = np.random.default_rng([seed, 1])
    weeks = REFERENCE_WEEKS + JUDGED_WEEKS + math.ceil((max(EXPLICIT.maturity_days,
                                                            IMPLICIT.maturity_days) + 3.0) / 7.0)
    mixes = list(MIXES)
    return [YearSpec(mix=mixes[i % 3], outcomes=EXPLICIT if i % 6 < 3 else IMPLICIT,
                     weekly_volume=float(np.exp(rng.uniform(np.log(1000.0), np.log(4000.0)))),
                     weeks=weeks, seasonal_phase=float(rng.uniform(0.0, 2 * np.pi)),
                     second_version_week=REFERENCE_WEEKS + JUDGED_WEEKS // 2)
            for i in range(years)]


def power_spec(odds_ratio: float) -> YearSpec:
    until = SHIFT_DAY + 7.0 * POWER_WEEKS
    return YearSpec(mix="beta(2,8)", outcomes=EXPLICIT, weekly_volume=2000.0,
                    weeks=math.ceil(until / 7.0) + 1, seasonal_amplitude=0.0,
                    shift=Shift(SHIFT_DAY, odds_ratio, segment=1))


POWER_TIMELINE = Timeline(REFERENCE_WEEKS, math.ceil(SHIFT_DAY / 7.0) - REFERENCE_WEEKS + POWER_WEEKS,
                          until_day=SHIFT_DAY + 7.0 * POWER_WEEKS)
NULL_TIMELINE = Timeline(REFERENCE_WEEKS, JUDGED_WEEKS)


@dataclass(frozen=True)
class Task:
    label: str  # "null" or the odds ratio of a power run
    index: int
    spec: YearSpec
    seed: np.random.SeedSequence


@dataclass
class _Worker:
    """What a worker process keeps between its runs: the rules and its design cache."""

    rules: list[Rule]
    table: DesignTable


_WORKER: list[_Worker] = []  # this process's worker state, once set up


def _init_worker() -> None:
    """One BLAS thread per worker: the Markov designs oversubscribe the cores otherwise."""
    threadpool_limits(1)
    _WORKER[:] = [_Worker(default_rules(BUDGET), DesignTable())]


@dataclass(frozen=True)
class Done:
    task: Task
    result: RunResult
    designs: int  # Markov designs this task added to its worker's table
    cpu_seconds: float


def _run_task(task: Task) -> Done:
    worker = _WORKER[0]
    before, cpu = worker.table.designs, time.process_time()
    if task.label == "null":
        result = run(task.spec, task.seed, worker.rules, worker.table, NULL_TIMELINE)
    else:
        result = run(task.spec, task.seed, worker.rules, worker.table, POWER_TIMELINE, feed=False)
    return Done(task, result, worker.table.designs - before, time.process_time() - cpu)


def tasks(years: int, runs: int, seed: int, odds_ratios: Iterable[float] = (2.0, 1.5)) -> list[Task]:
    root = np.random.SeedSequence(seed)
    null_seeds, power_seeds = root.spawn(2)
    out = [Task("null", i, s, q) for i, (s, q) in enumerate(zip(null_specs(years, seed),
                                                                null_seeds.spawn(years), strict=True))]
    for odds, seeds in zip(odds_ratios, power_seeds.spawn(2), strict=False):
        out += [Task(f"{odds:g}", i, power_spec(odds), q) for i, q in enumerate(seeds.spawn(runs))]
    return out


def execute(all_tasks: list[Task], workers: int) -> Iterator[Done]:
    """Run the tasks over ``workers`` processes (in this process when 1), longest first."""
    ordered = sorted(all_tasks, key=lambda t: t.label != "null")
    if workers <= 1:
        _init_worker()
        yield from map(_run_task, ordered)
        return
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(workers, initializer=_init_worker) as pool:
        yield from pool.imap_unordered(_run_task, ordered)


# ----------------------------------------------------------------------------- figures
@dataclass
class NullFigures:
    per_year: np.ndarray  # false alarms of each year
    specs: list[YearSpec]
    rules_of_year: list[list[str]]  # the rule of each false alarm, per year
    verdicts: Counter[tuple[str, str]]
    mean: float
    interval: tuple[float, float]
    p_any: float
    p_any_interval: tuple[float, float]


@dataclass
class PowerFigures:
    odds_ratio: float
    delays: np.ndarray  # days from the shift to the first opening; inf: none within POWER_WEEKS
    first_rule: Counter[str]
    pre_shift: int  # alarms opened on the affected streams before the shift (all runs)
    maturity_days: float

    @property
    def runs(self) -> int:
        return int(self.delays.size)

    @property
    def missed(self) -> float:
        return float(np.mean(~np.isfinite(self.delays)))

    def within(self, days: float) -> float:
        return float(np.mean(self.delays <= days))

    def quantile(self, q: float, *, after_maturity: bool = False) -> float:
        """Quantile over every run, misses counted as later than anything (inf when they reach it)."""
        value = float(np.quantile(np.sort(self.delays), q, method="inverted_cdf"))
        return value - self.maturity_days if after_maturity else value


@dataclass
class Report:
    null: NullFigures | None
    power: dict[float, PowerFigures] = field(default_factory=dict)
    rules: list[Rule] = field(default_factory=list)
    wall_seconds: float = 0.0
    cpu_seconds: float = 0.0  # summed over the runs (the workers' own CPU time)
    designs: int = 0


def bootstrap_mean(values: np.ndarray, rng: np.random.Generator) -> tuple[float, float]:
    """Percentile 95 % interval of the mean, resampling years with replacement."""
    idx = rng.integers(0, values.size, size=(BOOTSTRAP, values.size))
    means = values[idx].mean(axis=1)
    lo, hi = np.quantile(means, [0.025, 0.975])
    return float(lo), float(hi)


def null_figures(results: list[tuple[Task, RunResult]], seed: int) -> NullFigures:
    results = sorted(results, key=lambda r: r[0].index)
    per_year = np.array([len(r.openings) for _, r in results], dtype=np.float64)
    verdicts: Counter[tuple[str, str]] = Counter()
    for _, r in results:
        verdicts.update(r.verdicts)
    rng = np.random.default_rng([seed, 2])
    any_ = (per_year > 0).astype(np.float64)
    return NullFigures(per_year, [t.spec for t, _ in results],
                       [[o.rule for o in r.openings] for _, r in results], verdicts,
                       float(per_year.mean()), bootstrap_mean(per_year, rng),
                       float(any_.mean()), bootstrap_mean(any_, rng))


def _affected(opening: Opening, segment: int) -> bool:
    return opening.version == 0 and opening.segment in (ALL, f"{SEGMENT_KEY}={SEGMENT_VALUES[segment]}")


def power_figures(odds: float, results: list[tuple[Task, RunResult]]) -> PowerFigures:
    delays, first_rule, pre = [], Counter[str](), 0
    for task, result in results:
        shift = task.spec.shift
        assert shift is not None
        mine = sorted((o for o in result.openings if _affected(o, shift.segment)), key=lambda o: o.day)
        pre += sum(o.day < shift.start_day for o in mine)
        after = [o for o in mine if o.day >= shift.start_day]
        if after:
            delays.append(after[0].day - shift.start_day)
            first_rule[after[0].rule] += 1
        else:
            delays.append(math.inf)
    # the first affected cases are scored in the shift's hour; they mature at its end + H + L
    maturity = EXPLICIT.maturity_days + 1.0 / 24.0
    return PowerFigures(odds, np.array(delays), first_rule, pre, maturity)


def run_bench(years: int, runs: int, seed: int, workers: int, odds_ratios: Iterable[float] = (2.0, 1.5),
              progress: bool = False) -> Report:
    start = time.perf_counter()
    odds_ratios = tuple(odds_ratios)
    all_tasks = tasks(years, runs, seed, odds_ratios)
    done: dict[str, list[tuple[Task, RunResult]]] = {}
    designs, cpu = 0, 0.0
    for i, item in enumerate(execute(all_tasks, workers), 1):
        done.setdefault(item.task.label, []).append((item.task, item.result))
        designs += item.designs
        cpu += item.cpu_seconds
        if progress and i % 20 == 0:
            print(f"  ... {i}/{len(all_tasks)} runs, {time.perf_counter() - start:.0f} s", flush=True)
    report = Report(null=null_figures(done["null"], seed) if years else None, rules=default_rules(BUDGET),
                    designs=designs, cpu_seconds=cpu)
    for odds in odds_ratios:
        if runs:
            report.power[odds] = power_figures(odds, done[f"{odds:g}"])
    report.wall_seconds = time.perf_counter() - start
    return report


# ----------------------------------------------------------------------------- printing
def _days(value: float) -> str:
    return "never" if not math.isfinite(value) else f"{value:.1f}"


def print_null(null: NullFigures, rules: list[Rule], seed: int) -> None:
    n = null.per_year.size
    print(f"\nA. {n} well-calibrated model-years (52 judged weeks each), budget {BUDGET:g} false alarm "
          f"a year, seed {seed}")
    ok = "met" if null.interval[1] <= GOAL_UPPER else "NOT met"
    print(f"false alarms per model-year: {null.mean:.3f} (95 % bootstrap {null.interval[0]:.3f} to "
          f"{null.interval[1]:.3f}); goal: upper bound <= {GOAL_UPPER:g}: {ok}")
    print(f"P(at least one false alarm in a year): {null.p_any:.3f} "
          f"({null.p_any_interval[0]:.3f} to {null.p_any_interval[1]:.3f})")
    print("\n| rule | kind | share / yr | false alarms | per year (95 % bootstrap) | "
          "window verdicts: crossed / within / not judged |")
    print("|---|---|---|---|---|---|")
    rng = np.random.default_rng([seed, 4])
    for rule in rules:
        v = [null.verdicts[(rule.name, s)] for s in ("crossed", "within", "not judged")]
        judged = "-" if not any(v) else " / ".join(str(x) for x in v)
        share = "outside" if rule.share is None else f"{rule.share:.3f}"
        counts = np.array([year.count(rule.name) for year in null.rules_of_year], dtype=np.float64)
        lo, hi = bootstrap_mean(counts, rng)
        print(f"| {rule.name} | {rule.kind} | {share} | {int(counts.sum())} | "
              f"{counts.mean():.3f} ({lo:.3f} to {hi:.3f}) | {judged} |")
    groups: list[tuple[str, np.ndarray]] = [
        (mix, np.array([s.mix == mix for s in null.specs])) for mix in MIXES]
    groups += [("explicit", np.array([not s.outcomes.implicit for s in null.specs])),
               ("implicit negatives", np.array([s.outcomes.implicit for s in null.specs]))]
    groups = [(name, mask) for name, mask in groups if mask.any()]
    print("\n| years of | n | false alarms / yr (95 % bootstrap) | P(>= 1) |")
    print("|---|---|---|---|")
    rng = np.random.default_rng([seed, 3])
    for name, mask in groups:
        values = null.per_year[mask]
        lo, hi = bootstrap_mean(values, rng)
        print(f"| {name} | {values.size} | {values.mean():.3f} ({lo:.3f} to {hi:.3f}) | "
              f"{np.mean(values > 0):.3f} |")
    print("\nfalse alarms per model-year by rule, in the same groups:")
    print("| rule | " + " | ".join(name for name, _ in groups) + " |")
    print("|---|" + "---|" * len(groups))
    for rule in rules:
        cells = []
        for _, mask in groups:
            count = sum(year.count(rule.name) for year, keep in zip(null.rules_of_year, mask, strict=True)
                        if keep)
            cells.append(f"{count / mask.sum():.3f}")
        print(f"| {rule.name} | " + " | ".join(cells) + " |")


def print_power(p: PowerFigures) -> None:
    print(f"\nB. odds x{p.odds_ratio:g} on region=b (a third of 2,000 cases a week, Beta(2,8), explicit "
          f"outcomes, H + L = {EXPLICIT.maturity_days:g} d): {p.runs} runs")
    print(f"delay from the shift, days: median {_days(p.quantile(0.5))}, 90th percentile "
          f"{_days(p.quantile(0.9))}; after maturity: median {_days(p.quantile(0.5, after_maturity=True))}, "
          f"90th percentile {_days(p.quantile(0.9, after_maturity=True))}")
    ok = "met" if p.within(GOAL_DETECT_DAYS) >= GOAL_DETECT_SHARE else "NOT met"
    goal = f"; goal >= {GOAL_DETECT_SHARE:.0%}: {ok}" if p.odds_ratio == 2.0 else ""
    print(f"found within {GOAL_DETECT_DAYS:g} days: {p.within(GOAL_DETECT_DAYS):.0%}{goal}; "
          f"never within {POWER_WEEKS} weeks: {p.missed:.0%}; first alarm by rule: "
          + ", ".join(f"{k} {v}" for k, v in p.first_rule.most_common())
          + f"; alarms on those streams before the shift: {p.pre_shift}")


def print_report(report: Report, seed: int, workers: int) -> None:
    if report.null is not None:
        print_null(report.null, report.rules, seed)
    for p in report.power.values():
        print_power(p)
    print(f"\nwall time {report.wall_seconds:.0f} s on {workers} worker process(es); CPU "
          f"{report.cpu_seconds:.0f} s in the runs (CPU / 2 is the wall time on two idle cores); "
          f"{report.designs} Markov designs (each worker designs h once per risk mix, side and grid "
          "target: null_year_charts.DesignTable)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--small", action="store_true",
                    help="the CI size: 12 model-years, 20 power runs per odds ratio")
    ap.add_argument("--years", type=int, default=None, help="null model-years (default 204)")
    ap.add_argument("--runs", type=int, default=None, help="power runs per odds ratio (default 100)")
    ap.add_argument("--seed", type=int, default=20290101)
    ap.add_argument("--workers", type=int, default=min(2, os.cpu_count() or 1))
    args = ap.parse_args()
    years = args.years if args.years is not None else (12 if args.small else 204)
    runs = args.runs if args.runs is not None else (20 if args.small else 100)
    print(f"null_year: {years} model-years, {runs} power runs per odds ratio, seed {args.seed}, "
          f"{args.workers} worker(s)", flush=True)
    report = run_bench(years, runs, args.seed, args.workers, progress=not args.small)
    print_report(report, args.seed, args.workers)


if __name__ == "__main__":
    main()
