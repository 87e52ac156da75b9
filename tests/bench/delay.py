"""Late events and the charts; the label completeness estimate against the truth.

    .venv/bin/python -m tests.bench.delay [--small] [--seeds N] [--cases N] [--seed S]

A. Chart false alarms with late events. A model with implicit negatives, horizon
H = 14 days and lag L = 1 (``null_year_traffic.IMPLICIT``'s settings), Beta(2,8)
risks, 2,000 cases a week, well calibrated. An event is reported after a
lognormal delay (median 3 days, σ 0.9) truncated to H + L, except a share
(0, 5 or 10 %) of events, chosen independently of p, that are *late*: reported
H + L + Exp(mean 10 days) after scoring though they happened inside the horizon.

* before (the code before issue 15, simulated exactly): a case is read at
  maturity (H + L after its scored hour) and a late event still unreported then
  reads as a 0; the chart is fed p.
* after (this code): the delay is measured from 26 weeks of history by
  ``stats.outcome_delay.right_truncated_cdf``; the wait is
  ``rollup.outcome_delay.complete_after`` (max(H + L, p95) when the late share
  exceeds 2 %); a case is read at that age (plus up to one hour, a job round),
  and the chart is fed p · F̂(age) (``alarms.charts.Reading.risks``).

Each arm's chart is designed by the service's designer (``alarms.charts.design_for``
via ``tests.bench.alarms.design``) for ARL0 = 2,000 cases on the risks it is fed,
run over ``--cases`` in-control cases per seed and restarted after each signal,
as a person resolving each alarm would. Printed: signals per case × ARL0 (1.0 =
as designed), for the lower chart (odds ratio ½) and the upper (2): below 1 the
chart is blind to its own alternative. Goal: lower chart ≤ 1.5 with 10 % late.
Also printed: the measured late-event share against the simulated one (goal
within 0.03).

B. Label completeness of recent weeks. At "now", for the 8 most recent closed
weeks, the estimate (``rollup.outcome_delay.completeness`` on the days' Σ p or
counts, the service's formula) against the truth (the share of the week's
eventual reports already reported), for (i) the implicit-negative model above
with 10 % late events and (ii) a model without horizon whose events report after
Gamma(2, 2) days and non-events after Gamma(3, 3.5) (means 4 and 10.5 days: the
missing outcomes of a recent week are mostly non-events). Goal: error ≤ 0.10.

C. Chart false alarms without a horizon (issue 15, sixth session). The model of B(ii):
explicit outcomes, events reported after Gamma(2, 2) days and non-events after
Gamma(3, 3.5), Beta(2,8) risks, calibrated. Three ways to read a case:

* at arrival (the code before this change): every case is read when its label
  arrives, fed p. All labels are read, so the stream read is the calibrated stream
  itself (the order by arrival is not simulated: the cases are exchangeable);
* at p95, p as is: a case is read once its age passes the measured p95 delay
  (``complete_after``, plus up to one hour), only if labeled by then, fed p;
* at p95, adjusted (this code): the same cases, fed the risk given a label by the
  case's age, p F̂₁ / (p F̂₁ + (1 − p) F̂₀) (``alarms.charts.Reading.risks``), F̂₁ and
  F̂₀ measured from 26 weeks of history.

Printed as in A, signals per case read × ARL0.

Recorded 2026-12-03 (the defaults: 10 seeds × 100,000 cases an arm; 103 s on 2 shared cores).
False alarms × design, before → after:

    late   lower chart     upper chart     late share measured (after)
     0 %   1.01 → 0.98     0.97 → 1.01     0.0008
     5 %   1.60 → 1.00     0.55 → 0.96     0.0503
    10 %   2.60 → 1.02     0.33 → 0.97     0.0992

Before, the lower chart raised 1.6-2.6 times its design and the upper chart saw a third to a
half of its expected signals (it reads missing events as fewer events than predicted); after,
both are on design. Completeness of the 8 most recent weeks: max |estimate − truth| 0.008
(implicit negatives, 10 % late; truths 0.45-1.00) and 0.005 (no horizon; truths 0.19-1.00).

Recorded 2026-12-03, sixth session (same defaults; 25 s at load average 2-3), C: false alarms
× design, at arrival / at p95 with p as is / at p95 adjusted:

    lower chart   1.03   0.59   1.05
    upper chart   1.06   1.63   1.08

Read at the p95 age as they are, the labels lean towards events (non-events report later):
the upper chart raised 1.63 × its design and the lower chart went half blind; fed the risk
given a label by the age, both are on design again. A and B printed the figures above unchanged.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np
from scipy import stats
from tests.bench.alarms import count_signals, design

from calibrant.alarms.charts import Reading
from calibrant.rollup.outcome_delay import MAX_DELAY_DAYS, OutcomeDelay, complete_after, completeness
from calibrant.stats.cusum import LOWER_ODDS_RATIO, UPPER_ODDS_RATIO
from calibrant.stats.outcome_delay import right_truncated_cdf
from calibrant.store.mature_cases import HOUR
from calibrant.store.tables import Model

H, L = 14, 1
WEEKLY = 2000
HISTORY_WEEKS = 26
ARL0 = 2000.0
LATE_MEAN_DAYS = 10.0
NOW = datetime(2026, 6, 1, tzinfo=UTC)


def on_time_delays(rng: np.random.Generator, n: int) -> np.ndarray:
    """Lognormal (median 3, σ 0.9) truncated to [0, H + L] by its inverse CDF."""
    dist = stats.lognorm(0.9, scale=3.0)
    return dist.ppf(rng.random(n) * dist.cdf(H + L))


def event_delays(rng: np.random.Generator, n: int, late_share: float) -> np.ndarray:
    d = on_time_delays(rng, n)
    late = rng.random(n) < late_share
    d[late] = H + L + rng.exponential(LATE_MEAN_DAYS, int(late.sum()))
    return d


@dataclass
class History:
    """Cases scored uniformly over the weeks before now: age (days), p, event, report delay (days)."""

    age: np.ndarray
    p: np.ndarray
    event: np.ndarray
    delay: np.ndarray

    @property
    def reported(self) -> np.ndarray:
        return self.event & (self.delay <= self.age)


def history(rng: np.random.Generator, late_share: float, weeks: int = HISTORY_WEEKS) -> History:
    n = WEEKLY * weeks
    age = rng.uniform(0, 7 * weeks, n)
    p = rng.beta(2, 8, n)
    event = rng.random(n) < p
    return History(age, p, event, event_delays(rng, n, late_share))


def measured(h: History) -> OutcomeDelay:
    """What the alarms job would store: F̂ of the events reported so far, and the late share."""
    seen = h.reported & (h.age <= MAX_DELAY_DAYS)
    dist = right_truncated_cdf(h.delay[seen], h.age[seen], max_days=MAX_DELAY_DAYS)
    assert dist is not None
    share = float(1.0 - dist.at(H + L))
    return OutcomeDelay(NOW, dist, dist, share, int((seen & (h.delay > H + L)).sum()), [])


MODEL = Model(outcome_horizon_days=H, outcome_lag_days=L, implicit_negatives=True)


def chart_ratio(r_a: float, late_share: float, after: bool, seeds: int, cases: int,
                seed: int) -> tuple[float, float]:
    """(signals × ARL0 / cases over all seeds, mean measured late share).

    The limit h is designed once per arm, on the first seed's fed risks (the seeds differ
    only in their draws, and a design costs seconds).
    """
    signals, shares = 0, []
    h: float | None = None
    for k in range(seeds):
        rng = np.random.default_rng([seed, k, int(late_share * 1000), int(after)])
        p = rng.beta(2, 8, cases)
        y = rng.random(cases) < p
        d = event_delays(rng, cases, late_share)
        if after:
            delay = measured(history(rng, late_share))
            shares.append(delay.late_event_share)
            wait = complete_after(MODEL, delay)
            assert wait is not None
            age = wait / timedelta(days=1) + rng.uniform(0, 1 / 24, cases)
            reading = Reading.of(MODEL, delay)
            assert reading.reported is not None
            risk = p * reading.reported.at(age)
        else:
            age = np.full(cases, float(H + L))
            risk = p
        y_read = (y & (d <= age)).astype(np.float64)
        if h is None:
            h = design(risk[:5000], r_a, ARL0)
        signals += count_signals(h, r_a, risk, y_read)
    return signals * ARL0 / (seeds * cases), float(np.mean(shares)) if shares else float("nan")


def weeks_error(rng: np.random.Generator, *, implicit: bool, late_share: float) -> list[tuple[float, float]]:
    """(estimate, truth) of the 8 most recent closed weeks' completeness."""
    weeks = HISTORY_WEEKS
    n = WEEKLY * weeks
    age = rng.uniform(0, 7 * weeks, n)
    p = rng.beta(2, 8, n)
    event = rng.random(n) < p
    if implicit:
        delay = event_delays(rng, n, late_share)
        reports = event
    else:
        delay = np.where(event, rng.gamma(2.0, 2.0, n), rng.gamma(3.0, 3.5, n))
        reports = np.ones(n, dtype=bool)
    seen = reports & (delay <= age)
    dist = right_truncated_cdf(delay[seen], age[seen], max_days=MAX_DELAY_DAYS)
    assert dist is not None
    # NOW is a Monday 00:00 here: week w covers ages [7w, 7w + 7).
    scored = np.array([NOW - timedelta(days=float(a)) for a in age])
    day = np.array([s.replace(hour=0, minute=0, second=0, microsecond=0) for s in scored])
    out = []
    for w in range(1, 9):
        in_week = (age >= 7 * (w - 1)) & (age < 7 * w)
        weights: dict[datetime, float] = {}
        for d, q in zip(day[in_week], p[in_week], strict=True):
            weights[d] = weights.get(d, 0.0) + (q if implicit else 1.0)
        estimate = completeness(dist, weights, NOW)
        assert estimate is not None
        truth = float(seen[in_week & reports].sum() / max((in_week & reports).sum(), 1))
        out.append((estimate, truth))
    return out


MODEL_NO_HORIZON = Model(outcome_horizon_days=None, outcome_lag_days=0, implicit_negatives=False)
NO_HORIZON_ARMS = ("at arrival", "at p95, p as is", "at p95, adjusted")


def class_delays(rng: np.random.Generator, event: np.ndarray) -> np.ndarray:
    """Events after Gamma(2, 2) days, non-events after Gamma(3, 3.5): non-events report later."""
    return np.where(event, rng.gamma(2.0, 2.0, event.size), rng.gamma(3.0, 3.5, event.size))


def measured_no_horizon(rng: np.random.Generator) -> OutcomeDelay:
    """What the alarms job would store for explicit outcomes: F̂ of all reports, of events, of non-events."""
    n = WEEKLY * HISTORY_WEEKS
    age = rng.uniform(0, 7 * HISTORY_WEEKS, n)
    event = rng.random(n) < rng.beta(2, 8, n)
    delay = class_delays(rng, event)
    seen = delay <= age
    dists = [right_truncated_cdf(delay[m], age[m], max_days=MAX_DELAY_DAYS)
             for m in (seen, seen & event, seen & ~event)]
    assert all(d is not None for d in dists)
    return OutcomeDelay(NOW, dists[0], dists[1], None, 0, [], non_events=dists[2])  # type: ignore[arg-type]


def chart_ratio_no_horizon(r_a: float, arm: str, seeds: int, cases: int, seed: int) -> float:
    """Signals × ARL0 / cases read, over all seeds, for one of ``NO_HORIZON_ARMS``."""
    signals, read = 0, 0
    h: float | None = None
    for k in range(seeds):
        rng = np.random.default_rng([seed, k, 3])
        p = rng.beta(2, 8, cases)
        y = rng.random(cases) < p
        d = class_delays(rng, y)
        if arm == NO_HORIZON_ARMS[0]:
            risk, y_read = p, y.astype(np.float64)
        else:
            delay = measured_no_horizon(rng)
            wait = complete_after(MODEL_NO_HORIZON, delay)
            assert wait is not None
            age = wait / timedelta(days=1) + rng.uniform(0, 1 / 24, cases)
            labeled = d <= age
            risk, y_read = p[labeled], y[labeled].astype(np.float64)
            if arm == NO_HORIZON_ARMS[2]:
                reading = Reading.of(MODEL_NO_HORIZON, delay)
                assert reading.by_class is not None
                # matured = end of the scored hour (L = 0); Reading takes the hour's middle
                matured = [NOW - timedelta(days=float(a)) + HOUR / 2 for a in age[labeled]]
                risk, _ = reading.risks(risk, matured, NOW)
        if h is None:
            h = design(risk[:5000], r_a, ARL0)
        signals += count_signals(h, r_a, risk, y_read)
        read += risk.size
    return signals * ARL0 / read


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--small", action="store_true")
    parser.add_argument("--seeds", type=int, default=10)
    parser.add_argument("--cases", type=int, default=100_000)
    parser.add_argument("--seed", type=int, default=2026_12_03)
    args = parser.parse_args(argv)
    seeds, cases = (3, 20_000) if args.small else (args.seeds, args.cases)
    started = time.perf_counter()
    print(f"A. chart false alarms × design (ARL0 {ARL0:.0f}); {seeds} seeds × {cases} cases an arm")
    print(f"{'late':>5} {'chart':>6} {'before':>8} {'after':>8} {'late share measured':>20}")
    for late in (0.0, 0.05, 0.10):
        for name, r_a in (("lower", LOWER_ODDS_RATIO), ("upper", UPPER_ODDS_RATIO)):
            before, _ = chart_ratio(r_a, late, False, seeds, cases, args.seed)
            after, share = chart_ratio(r_a, late, True, seeds, cases, args.seed)
            print(f"{late:>5.0%} {name:>6} {before:>8.2f} {after:>8.2f} {share:>20.4f}", flush=True)
    print("B. label completeness of the 8 most recent weeks: estimate − truth")
    rng = np.random.default_rng([args.seed, 2])
    for label, implicit in (("implicit negatives, 10 % late", True), ("no horizon, events first", False)):
        pairs = weeks_error(rng, implicit=implicit, late_share=0.10)
        errors = [e - t for e, t in pairs]
        print(f"  {label}: truth {', '.join(f'{t:.3f}' for _, t in pairs)}")
        print(f"  {'':>{len(label)}}  error {', '.join(f'{e:+.3f}' for e in errors)}  "
              f"(max |error| {max(abs(e) for e in errors):.3f})", flush=True)
    print("C. no horizon, non-events report later: chart false alarms × design")
    print(f"{'chart':>6} " + " ".join(f"{a:>18}" for a in NO_HORIZON_ARMS))
    for name, r_a in (("lower", LOWER_ODDS_RATIO), ("upper", UPPER_ODDS_RATIO)):
        ratios = [chart_ratio_no_horizon(r_a, arm, seeds, cases, args.seed) for arm in NO_HORIZON_ARMS]
        print(f"{name:>6} " + " ".join(f"{r:>18.2f}" for r in ratios), flush=True)
    print(f"wall {time.perf_counter() - started:.1f} s")


if __name__ == "__main__":
    main()
