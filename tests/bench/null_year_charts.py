"""One chart rule on one simulated stream, run the way ``alarms.charts`` runs it.

The stream consumes its labeled mature cases in maturity order (an explicit
model's case whose outcome is not in by maturity is passed over, as the
service counts it ``unlabeled_at_maturity``), one day's cases per run:

1. gather ``min_design_cases`` labeled mature risks, then design h for
   ARL0 = K × (cases a day) × 365.25 / B_r (``charts.cases_per_day``,
   ``stats.cusum_design.arl0_for_false_alarm_budget``), K the rule's streams
   existing that day (all versions), B_r the rule's share of the budget; the
   chart starts with the cases after the design;
2. before each day's cases, redesign (keeping S) when the target or the mean
   risk moved materially (``charts._material_change``, the service's own test);
3. advance with the kind's ``decide`` (``stats.cusum.advance``); a crossing
   opens an alarm; the signalled chart consumes the rest of that day without
   signalling again, and a person resolves the alarm the next day, which
   restarts the chart at S = 0 with h redesigned (``charts.restart``).

Design cache (``DesignTable``): a Markov design (``charts.design_for``) takes
about 0.3 s, and a bench year needs hundreds, so h is designed once per risk
mix and side on a fixed sample of ``design_sample`` risks of the mix, at target
ARL0s a factor 4 apart, and interpolated linearly in ln ARL0 between them.
h is close to linear in ln ARL0 (ARL0 grows about like e^h; Beta(2,8), upper
chart: h = 7.976, 10.279, 12.580 at 1e5, 1e6, 1e7 cases), so the interpolation
moves h by far less than 0.01 (checked in tests/bench/test_null_year_small.py).
The stream's own recent risks differ from the fixed sample only by sampling
(and by the rare extreme prediction, whose weight is ≈ 0 when its outcome
follows p): h is that of the stream's mix, not of its exact 5,000 risks.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from tests.bench.null_year_traffic import MIXES
from tests.bench.null_year_window import DAY_ZERO

from calibrant.alarms import charts
from calibrant.alarms.kinds import spec
from calibrant.alarms.kinds.calibration_chart import ChartParams
from calibrant.stats.cusum import CusumState, new_chart
from calibrant.stats.cusum_design import arl0_for_false_alarm_budget

GRID_BASE = 1e3  # smallest grid target (cases)
GRID_FACTOR = 4.0  # grid targets GRID_BASE × 4^k
_SYNTHETIC_RATE = 100.0  # cases a day of the fixed design sample (any rate: the share sets the target)
_SECONDS = 86400.0


class DesignTable:
    """h of ``charts.design_for`` for a risk mix, a side and a target ARL0 (module docstring)."""

    def __init__(self, seed: int = 20290101) -> None:
        self._seed = seed
        self._h: dict[tuple[str, float, int], float] = {}
        self.designs = 0

    def sample(self, mix: str, n: int) -> np.ndarray:
        a, b = MIXES[mix]
        return np.random.default_rng([self._seed, sorted(MIXES).index(mix)]).beta(a, b, n)

    def grid_h(self, mix: str, params: ChartParams, k: int) -> float:
        """h designed by the service for the grid target GRID_BASE × 4^k."""
        key = (mix, float(params.odds_ratio), k)
        if key not in self._h:
            risks = self.sample(mix, params.design_sample)
            times = np.arange(risks.size, dtype=np.float64) * _SECONDS / _SYNTHETIC_RATE
            rate = charts.cases_per_day(times)
            target = GRID_BASE * GRID_FACTOR**k
            design = charts.design_for(np.vstack([risks, times]), params, 1, DAY_ZERO,
                                       rate * 365.25 / target)
            if "error" in design:
                raise RuntimeError(f"design failed for {mix}, R_A {params.odds_ratio}: {design['error']}")
            self.designs += 1
            self._h[key] = float(design["h"])
        return self._h[key]

    def h(self, mix: str, params: ChartParams, target: float) -> float:
        """h for ``target`` cases, linear in ln target between the two grid designs around it."""
        x = math.log(target / GRID_BASE) / math.log(GRID_FACTOR)
        k = max(math.floor(x), 0)
        frac = x - k
        return (1.0 - frac) * self.grid_h(mix, params, k) + frac * self.grid_h(mix, params, k + 1)


@dataclass(frozen=True, slots=True)
class StreamCases:
    """A stream's mature cases in maturity order: day matured, risk, label at maturity (−1: none)."""

    matured: np.ndarray
    p: np.ndarray
    label: np.ndarray


@dataclass
class ChartRun:
    """What the stream's chart did: days of its crossings, its redesigns while running
    (day, h before, h after, S kept), and how many designs it asked for."""

    crossings: list[float] = field(default_factory=list)
    redesigns: list[tuple[float, float, float, float]] = field(default_factory=list)
    designs: int = 0


@dataclass
class _Stream:
    params: ChartParams
    mix: str
    share: float
    table: DesignTable
    recent: np.ndarray = field(default_factory=lambda: np.empty((2, 0)))
    design: dict[str, Any] | None = None
    state: CusumState | None = None
    restart_day: float | None = None
    designs: int = 0

    def _append(self, p: np.ndarray, t: np.ndarray) -> None:
        self.recent = np.hstack([self.recent, np.vstack([p, t * _SECONDS])])[:, -self.params.design_sample:]

    def redesign(self, n_charts: int) -> dict[str, Any]:
        """A design dict like ``charts.design_for``'s, for this stream's rate, K and share."""
        risks, times = self.recent
        target = arl0_for_false_alarm_budget(charts.cases_per_day(times), n_charts, self.share)
        self.designs += 1
        return {"h": self.table.h(self.mix, self.params, target), "target_arl0": target,
                "mean_risk": float(risks.mean())}

    def ready_to_design(self) -> bool:
        return self.recent.shape[1] >= self.params.min_design_cases


def run_chart(cases: StreamCases, params: ChartParams, mix: str, share: float,
              n_charts: Callable[[float], int], table: DesignTable, end_day: float) -> ChartRun:
    """Feed the stream day by day up to ``end_day`` (module docstring); crossings by maturity day."""
    decide = spec("calibration_chart").decide
    stream = _Stream(params, mix, share, table)
    run = ChartRun()
    if not cases.matured.size:
        return run
    first = math.floor(cases.matured[0])
    edges = np.searchsorted(cases.matured, np.arange(first, math.ceil(end_day) + 1, dtype=np.float64))
    for i, day in enumerate(range(first, math.ceil(end_day))):
        lo, hi = int(edges[i]), int(edges[i + 1])
        keep = lo + np.flatnonzero(cases.label[lo:hi] >= 0)
        if stream.restart_day is not None and day >= stream.restart_day:
            _restart(stream, n_charts(day))
        if not keep.size:
            continue
        p, y, t = cases.p[keep], cases.label[keep].astype(np.float64), cases.matured[keep]
        start = 0
        if stream.state is None:
            start = min(max(params.min_design_cases - stream.recent.shape[1], 0), p.size)
            stream._append(p[:start], t[:start])
            if stream.ready_to_design():
                stream.design = stream.redesign(n_charts(day))
                stream.state = new_chart(stream.design["h"], params.odds_ratio)
            if stream.state is None:
                continue
        elif (not stream.state.signalled and stream.design is not None
              and charts._material_change(stream.design, stream.recent, params, n_charts(day), share)):
            stream.design = stream.redesign(n_charts(day))
            h = float(stream.design["h"])
            run.redesigns.append((float(day), stream.state.h, h, stream.state.s))
            stream.state = replace(stream.state, h=h, s=min(stream.state.s, h))
        step = decide(stream.state, p[start:], y[start:])
        if step.signal_index is not None:
            run.crossings.append(float(t[start + step.signal_index]))
            stream.restart_day = day + 1
        stream.state = step.state
        stream._append(p[start:], t[start:])
    run.designs = stream.designs
    return run


def _restart(stream: _Stream, n_charts: int) -> None:
    """``charts.restart``: S back to 0, h redesigned from the stream's recent risks."""
    if stream.ready_to_design():
        stream.design = stream.redesign(n_charts)
    assert stream.design is not None  # a chart that signalled was designed
    stream.state = new_chart(float(stream.design["h"]), stream.params.odds_ratio)
    stream.restart_day = None
