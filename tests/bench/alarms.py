"""Honesty benchmark of the chart rules: false-alarm rate against the design, and detection delays.

For several risk mixes, the service's chart design (``alarms.charts.design_for``:
Markov chain of Brook & Evans 1972 on the stream's own risks) is made for a
target in-control ARL0; in-control streams (y ~ Bernoulli(p)) are then run
with a restart after every signal, as a person resolving each alarm would,
and the observed false alarms per case are compared with 1/ARL0 (goal: within
±20 %). Detection delay: cases from a change to the first signal after it,
for an odds doubling (q = 2p/(1 + p), Steiner et al. 2000) and a slope change
(logit q = 0.7 logit p). The weekly degradation rule (excess log-loss,
``tests.bench.weekly_rule``) is measured on the same mixes and shifts: its
in-control weekly false alarms against its level (at most level × weeks, the
effect floor makes it fewer) and its delay to the end of the first firing week.
Every delay is shown in cases and in weeks at a stated weekly volume. Run:
``.venv/bin/python -m tests.bench.alarms``.
"""

from __future__ import annotations

import argparse
from datetime import UTC, datetime

import numpy as np
from scipy.special import expit, logit
from tests.bench import weekly_rule

from calibrant.alarms.charts import design_for
from calibrant.alarms.kinds.calibration_chart import ChartParams
from calibrant.stats.cusum import advance, new_chart, reset

MIXES = {"beta(2,8)": (2, 8), "beta(1,20)": (1, 20), "beta(5,5)": (5, 5)}
NOW = datetime(2026, 1, 1, tzinfo=UTC)


def design(risks: np.ndarray, r_a: float, arl0: float) -> float:
    """h for ARL0 cases: the budget formula gives K × rate × 365.25 / budget; pick rate to hit arl0."""
    params = ChartParams(odds_ratio=r_a, min_design_cases=200, design_sample=max(200, risks.size))
    times = np.arange(risks.size, dtype=np.float64) * 86400.0  # one case a day: rate = n / span ≈ 1
    rate = risks.size / max((times[-1] - times[0]) / 86400.0, 1.0)
    budget = rate * 365.25 / arl0
    params = params.model_copy(update={"false_alarms_per_year": budget})
    return float(design_for(np.vstack([risks, times]), params, 1, NOW)["h"])


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


def delay(h: float, r_a: float, sampler, shift, rng: np.random.Generator, runs: int, tau: int = 500) -> float:
    delays = []
    for _ in range(runs):
        p = sampler(rng, tau + 20000)
        q = p.copy()
        q[tau:] = shift(p[tau:])
        y = (rng.random(p.size) < q).astype(float)
        step = advance(new_chart(h, r_a), p, y)
        if step.signal_index is not None and step.signal_index >= tau:
            delays.append(step.signal_index - tau + 1)
    return float(np.mean(delays)) if delays else float("nan")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--arl0", type=float, default=2000.0)
    ap.add_argument("--cases", type=int, default=400_000)
    ap.add_argument("--runs", type=int, default=300)
    ap.add_argument("--weekly-volume", type=int, default=2000, help="cases per week")
    ap.add_argument("--weeks", type=int, default=2000, help="in-control weeks for the weekly rule")
    args = ap.parse_args()
    rng = np.random.default_rng(20261202)
    v = args.weekly_volume
    level = weekly_rule.PARAMS.level
    print(f"target ARL0 {args.arl0:g} cases; {args.cases} in-control cases per chart; weekly rule: "
          f"{args.weeks} in-control weeks of {v} cases, level {level:g}, no labeled reference")
    print(f"delays: mean cases from the change (lower chart: odds halved), and weeks at {v} cases a week")
    print("| mix | rule | h / level | false alarms | expected | ratio | delay odds x2 | delay slope 0.7 |")
    print("|---|---|---|---|---|---|---|---|")

    def cell(cases: float, missed: int = 0) -> str:
        text = f"{cases:.0f} ({cases / v:.2f} wk)"
        return text + (f", {missed} of {args.runs} missed" if missed else "")

    for name, (a, b) in MIXES.items():
        def sampler(g, n, a=a, b=b):
            return g.beta(a, b, n)
        for label, r_a in (("upper", 2.0), ("lower", 0.5)):
            h = design(sampler(rng, 5000), r_a, args.arl0)
            p = sampler(rng, args.cases)
            y = (rng.random(p.size) < p).astype(float)
            fa = count_signals(h, r_a, p, y)
            expected = args.cases / args.arl0
            odds = 2.0 if r_a > 1 else 0.5
            d_odds = delay(h, r_a, sampler, lambda q, o=odds: o * q / (1 - q + o * q), rng, args.runs)
            d_slope = delay(h, r_a, sampler, lambda q: expit(0.7 * logit(q)), rng, args.runs)
            print(f"| {name} | {label} chart | {h:.3f} | {fa} | {expected:.1f} | {fa / expected:.2f} | "
                  f"{cell(d_odds)} | {cell(d_slope)} |")
        fa = weekly_rule.false_alarms(sampler, rng, args.weeks, v)
        bound = level * args.weeks
        d_odds, m_odds = weekly_rule.delay(sampler, lambda q: 2 * q / (1 + q), rng, args.runs, v)
        d_slope, m_slope = weekly_rule.delay(sampler, lambda q: expit(0.7 * logit(q)), rng, args.runs, v)
        print(f"| {name} | weekly excess log-loss | {level:g} | {fa} | ≤ {bound:.1f} | {fa / bound:.2f} | "
              f"{cell(d_odds, m_odds)} | {cell(d_slope, m_slope)} |")


if __name__ == "__main__":
    main()
