"""The demo's invented scenario: Quillfeather Parcels, a made-up courier, predicts late deliveries.

Every name here is invented. Each parcel is scored when it is booked with the
probability that it misses its promised day. Three depots are declared
segments. The model is calibrated until ``drift_day``; from then on, in the
Uplands depot only (a made-up road closure), the odds of a late delivery are
doubled: q = 2p / (1 − p + 2p), the change the upper calibration chart is
built to detect. Late deliveries are reported 6 h to ~3 days after booking;
on-time ones are never reported, so the model declares a horizon with implicit
negatives: a parcel without a report when its horizon and lag have passed was
on time.

The timeline ends ``end_gap_days`` before the most recent Monday 00:00 UTC
(every case mature when the demo runs) and starts on a Monday, so ISO weeks
and the per-hour summaries line up the same way whatever day the demo runs:
with a fixed seed the data, and so every chart decision, are the same.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta

import numpy as np

COMPANY = "Quillfeather Parcels"
MODEL = "late-parcel"
SEGMENT_KEY = "depot"
DRIFTING_DEPOT = "uplands"
ODDS_RATIO = 2.0
HORIZON_DAYS = 3  # a parcel not reported late within 3 days of booking was on time
LAG_DAYS = 1  # depots report a late delivery up to a day after it is known


@dataclass(frozen=True)
class Depot:
    name: str
    share: float  # of the daily bookings
    base_logit: float  # typical lateness log-odds before the model's own case mix


DEPOTS = (
    Depot("riverside", 0.40, -2.3),
    Depot("uplands", 0.35, -2.0),
    Depot("harbour", 0.25, -2.6),
)


@dataclass(frozen=True)
class ScenarioConfig:
    days: int = 182  # 26 weeks
    drift_day: int = 126  # week 19 starts with the Uplands road closure
    parcels_per_day: int = 900
    seed: int = 20261
    end_gap_days: int = 7  # > horizon + lag, so every case is mature

    def start(self, now: datetime) -> datetime:
        """Monday 00:00 UTC, ``days`` before the end of the timeline."""
        today = now.astimezone(UTC).replace(hour=0, minute=0, second=0, microsecond=0)
        last_monday = today - timedelta(days=today.weekday())
        end = last_monday - timedelta(days=self.end_gap_days)
        start = end - timedelta(days=self.days)
        return start - timedelta(days=start.weekday())  # days may not be a multiple of 7

    def drift_date(self, now: datetime) -> datetime:
        return self.start(now) + timedelta(days=self.drift_day)


@dataclass
class Traffic:
    start: datetime
    drift_date: datetime
    predictions: list[dict] = field(default_factory=list)
    outcomes: list[dict] = field(default_factory=list)
    late_by_depot: dict[str, int] = field(default_factory=dict)
    parcels_by_depot: dict[str, int] = field(default_factory=dict)


def shifted(p: np.ndarray, odds_ratio: float) -> np.ndarray:
    """The event probability when the odds of p are multiplied by ``odds_ratio``."""
    return odds_ratio * p / (1.0 - p + odds_ratio * p)


def generate(config: ScenarioConfig, now: datetime) -> Traffic:
    """Every booking's prediction and every late delivery's report, in booking order."""
    rng = np.random.default_rng(config.seed)
    start = config.start(now)
    traffic = Traffic(start=start, drift_date=config.drift_date(now))
    names = np.array([d.name for d in DEPOTS])
    shares = np.array([d.share for d in DEPOTS])
    base = np.array([d.base_logit for d in DEPOTS])
    for day in range(config.days):
        n = config.parcels_per_day
        depot = rng.choice(len(DEPOTS), size=n, p=shares)
        # The model's score: depot level plus a parcel's own risk (distance, size, weather...).
        p = 1.0 / (1.0 + np.exp(-(base[depot] + rng.normal(0.0, 0.9, n))))
        q = p.copy()
        if day >= config.drift_day:
            hit = names[depot] == DRIFTING_DEPOT
            q[hit] = shifted(p[hit], ODDS_RATIO)
        late = rng.random(n) < q
        seconds = np.sort(rng.integers(0, 86_400, n))
        # Late parcels are known when they miss the promised day: 6 h to just under 3 days.
        report_hours = rng.uniform(6.0, HORIZON_DAYS * 24.0 - 1.0, n)
        day_start = start + timedelta(days=day)
        for i in range(n):
            parcel = f"qp-{day:03d}-{i:04d}"
            scored_at = day_start + timedelta(seconds=int(seconds[i]))
            name = str(names[depot[i]])
            traffic.predictions.append({"id": parcel, "probability": round(float(p[i]), 6),
                                        "scored_at": scored_at, "tags": {SEGMENT_KEY: name}})
            traffic.parcels_by_depot[name] = traffic.parcels_by_depot.get(name, 0) + 1
            if late[i]:
                traffic.outcomes.append({"id": parcel, "label": 1,
                                         "observed_at": scored_at + timedelta(hours=float(report_hours[i]))})
                traffic.late_by_depot[name] = traffic.late_by_depot.get(name, 0) + 1
    return traffic


MODEL_SETTINGS = {
    "description": f"{COMPANY} (invented): will the parcel miss its promised day?",
    "outcome_horizon_days": HORIZON_DAYS,
    "outcome_lag_days": LAG_DAYS,
    "implicit_negatives": True,
    "segment_keys": [SEGMENT_KEY],
}
