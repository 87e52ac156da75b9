"""Simulated traffic of one model-year for tests/bench/null_year.py: scores, outcomes, arrival times.

Every case's outcome is drawn from its true risk: y ~ Bernoulli(q) with q = p
(well calibrated), or, after a ``Shift``, q = OR·p / (1 − p + OR·p) on one
segment value (the odds multiplied by OR; Steiner et al. 2000 use the same
alternative). Time is in days from a Monday 00:00 UTC (day 0), so ISO weeks
are [7w, 7w + 7).

Outcome processes (``Outcomes``):

* explicit: every case gets its 0/1 outcome after a lognormal delay; the model
  has horizon H and lag L, so a case is mature H + L after its scored hour,
  and an outcome later than that is missing at maturity (independently of y,
  so the labeled cases stay calibrated) and arrives later;
* implicit negatives: only events are reported, after a lognormal delay
  truncated to the horizon (the event "within H" is the outcome the model
  predicts); a case without an event counts as 0 once mature.

Volume: a base weekly volume times a seasonal factor 1 + a·sin(2πw/52 + φ),
Poisson per week and version, spread uniformly over the week. One segment key
with three values carrying 1/2, 1/3 and 1/6 of the traffic (the second, "b",
carries a third). An occasional extreme prediction (p = 1e-9 or 1 − 1e-9, on
average one every ``extreme_every_weeks`` weeks per version) keeps its
outcome drawn from p. A second version shadow-scores from a given week on:
independent draws from the same risk mix at the same volume, so it is
calibrated too (independent streams are the worst case for the union bound;
shared cases would correlate the alarms without changing their mean).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

MIXES: dict[str, tuple[float, float]] = {"beta(1,20)": (1.0, 20.0), "beta(2,8)": (2.0, 8.0),
                                         "beta(5,5)": (5.0, 5.0)}
SEGMENT_KEY = "region"
SEGMENT_VALUES = ("a", "b", "c")
SEGMENT_SHARES = (1 / 2, 1 / 3, 1 / 6)  # "b" carries a third of the traffic
EXTREME_P = 1e-9


@dataclass(frozen=True, slots=True)
class Outcomes:
    """How outcomes arrive: horizon H and lag L of the model (days), lognormal delay median and σ."""

    implicit: bool
    horizon_days: float
    lag_days: float
    median_days: float
    sigma: float

    @property
    def maturity_days(self) -> float:
        """H + L: a case is mature this long after the end of its scored hour."""
        return self.horizon_days + self.lag_days


# Realistic defaults (our choice): explicit outcomes mostly within days, ~3 % later than H + L;
# events of an implicit-negative model within a two-week horizon.
EXPLICIT = Outcomes(implicit=False, horizon_days=10.0, lag_days=1.0, median_days=2.0, sigma=0.9)
IMPLICIT = Outcomes(implicit=True, horizon_days=14.0, lag_days=1.0, median_days=3.0, sigma=0.9)


@dataclass(frozen=True, slots=True)
class Shift:
    """From ``start_day`` on, cases of version 0 in segment value ``segment`` have odds × ``odds_ratio``."""

    start_day: float
    odds_ratio: float
    segment: int = 1


@dataclass(frozen=True, slots=True)
class YearSpec:
    mix: str
    outcomes: Outcomes
    weekly_volume: float
    weeks: int
    seasonal_amplitude: float = 0.25
    seasonal_phase: float = 0.0
    second_version_week: int | None = None
    extreme_every_weeks: float = 3.0
    shift: Shift | None = None


@dataclass(frozen=True, slots=True)
class Cases:
    """All cases, sorted by ``scored`` (days). ``arrival``: day the outcome arrives, inf if never."""

    scored: np.ndarray
    version: np.ndarray
    segment: np.ndarray
    p: np.ndarray
    y: np.ndarray
    arrival: np.ndarray

    def __len__(self) -> int:
        return int(self.scored.size)

    def take(self, idx: np.ndarray) -> Cases:
        return Cases(self.scored[idx], self.version[idx], self.segment[idx], self.p[idx], self.y[idx],
                     self.arrival[idx])


def matured_at(scored: np.ndarray, outcomes: Outcomes) -> np.ndarray:
    """End of the scored hour + H + L (``store.mature_cases.maturity``), in days."""
    return (np.floor(scored * 24.0) + 1.0) / 24.0 + outcomes.maturity_days


def _delays(rng: np.random.Generator, n: int, outcomes: Outcomes, cap: float | None) -> np.ndarray:
    """Lognormal delays; with ``cap`` drawn from the lognormal truncated to [0, cap] (inverse CDF)."""
    mu = np.log(outcomes.median_days)
    if cap is None:
        return np.exp(mu + outcomes.sigma * rng.standard_normal(n))
    top = norm.cdf((np.log(cap) - mu) / outcomes.sigma)
    return np.exp(mu + outcomes.sigma * norm.ppf(rng.random(n) * top))


def _true_risk(p: np.ndarray, odds_ratio: float) -> np.ndarray:
    return odds_ratio * p / (1.0 - p + odds_ratio * p)


def simulate(spec: YearSpec, rng: np.random.Generator) -> Cases:
    """The cases of ``spec.weeks`` weeks (module docstring)."""
    a, b = MIXES[spec.mix]
    parts: list[tuple[np.ndarray, ...]] = []
    for week in range(spec.weeks):
        season = 1.0 + spec.seasonal_amplitude * np.sin(2 * np.pi * week / 52.0 + spec.seasonal_phase)
        versions = [0] if spec.second_version_week is None or week < spec.second_version_week else [0, 1]
        for version in versions:
            n = int(rng.poisson(spec.weekly_volume * season))
            scored = 7.0 * week + 7.0 * rng.random(n)
            segment = rng.choice(len(SEGMENT_SHARES), size=n, p=SEGMENT_SHARES).astype(np.int8)
            p = rng.beta(a, b, n)
            if n and rng.random() < 1.0 / spec.extreme_every_weeks:
                p[int(rng.integers(n))] = EXTREME_P if rng.random() < 0.5 else 1.0 - EXTREME_P
            parts.append((scored, np.full(n, version, np.int8), segment, p))
    scored, version, segment, p = (np.concatenate(c) for c in zip(*parts, strict=True))
    order = np.argsort(scored, kind="stable")
    scored, version, segment, p = scored[order], version[order], segment[order], p[order]
    q = p.copy()
    if spec.shift is not None:
        hit = (version == 0) & (segment == spec.shift.segment) & (scored >= spec.shift.start_day)
        q[hit] = _true_risk(p[hit], spec.shift.odds_ratio)
    y = (rng.random(p.size) < q).astype(np.int8)
    out = spec.outcomes
    if out.implicit:
        arrival = np.full(p.size, np.inf)
        events = np.flatnonzero(y == 1)
        arrival[events] = scored[events] + _delays(rng, events.size, out, cap=out.horizon_days)
    else:
        arrival = scored + _delays(rng, p.size, out, cap=None)
    return Cases(scored, version, segment, p, y, arrival)


def label_state(cases: Cases, now: float) -> np.ndarray:
    """``Summary.from_arrays`` states as of day ``now``: 1/0 for an arrived outcome, −1 for none yet.

    With implicit negatives a case without an event never gets an outcome: it stays −1 and the
    label metrics count it as 0 once mature (``Summary.labeled(implicit_negatives=True)``).
    """
    return np.where(cases.arrival <= now, cases.y, -1).astype(np.int8)
