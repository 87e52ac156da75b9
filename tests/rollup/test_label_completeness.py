"""Label completeness and provisional periods of a model without a horizon, on both databases.

The stream: 10 weeks of traffic, 120 cases a day scored in the first two hours
of each day, every outcome reported after a Gamma(shape 3, scale 3) delay (mean
9 days; p95 18.9 days by scipy.stats.gamma). Only outcomes whose report time has
passed are posted. The truth of a week's completeness is the share of its
cases already reported (every case reports in the end); the service's estimate
must lie within 0.10 of it, and a week is provisional exactly while its estimate
is below 0.95. The same week is then watched as the clock moves on: provisional
a week after it closed, final five weeks later.
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest
from scipy import stats

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, iso, refresh
from tests.conftest import make_client

DAYS = 70
PER_DAY = 120
SHAPE, SCALE = 3.0, 3.0  # Gamma: mean 9 days


def _stream(seed: int) -> tuple[list[str], np.ndarray, list, np.ndarray, list]:
    rng = np.random.default_rng(seed)
    ids, scored = [], []
    for day in range(DAYS):
        seconds = np.sort(rng.integers(0, 2 * 3600, PER_DAY))
        for i, s in enumerate(seconds):
            ids.append(f"d{day}-{i}")
            scored.append(T0 + timedelta(days=day, seconds=int(s)))
    p = rng.beta(2, 8, len(ids))
    y = (rng.random(len(ids)) < p).astype(int)
    delay = rng.gamma(SHAPE, SCALE, len(ids))
    observed = [t + timedelta(days=float(d)) for t, d in zip(scored, delay, strict=True)]
    return ids, p, scored, y, observed


def _post(client, ids, y, observed, lo, hi) -> None:
    """Post the outcomes reported in (lo, hi]."""
    items = [{"id": i, "label": int(lab), "observed_at": iso(o)}
             for i, lab, o in zip(ids, y, observed, strict=True) if lo < o <= hi]
    for k in range(0, len(items), 10_000):
        r = client.post("/v1/models/late/outcomes", json={"outcomes": items[k:k + 10_000]})
        assert r.status_code == 200, r.text


def _weeks(client, now):
    r = client.get("/v1/models/late/metrics", params={
        "start": iso(T0), "end": iso(T0 + timedelta(days=DAYS)), "granularity": "week"})
    assert r.status_code == 200, r.text
    return r.json()["periods"]


def _truth(scored, observed, week_start, now) -> float:
    mask = [week_start <= s < week_start + timedelta(days=7) for s in scored]
    reported = [o <= now for o, m in zip(observed, mask, strict=True) if m]
    return float(np.mean(reported))


@pytest.mark.parametrize("db", ["sqlite", "postgresql"], indirect=True)
def test_weeks_of_a_model_without_horizon_are_provisional_until_their_labels_are_95_percent_in(db) -> None:
    ids, p, scored, y, observed = _stream(15)
    watched = 7  # the week of days 49-55: provisional a week after it closed, final five weeks later
    watched_start = T0 + timedelta(days=7 * watched)
    phases = [watched_start + timedelta(days=14), T0 + timedelta(days=DAYS),
              watched_start + timedelta(days=42)]
    clock = FixedClock(phases[0])
    posted, last = 0, T0 - timedelta(days=1)
    with make_client(db, clock=clock) as client:
        assert client.put("/v1/models/late", json={}).status_code == 201  # no horizon
        for now in phases:
            clock.set(now)
            new = [k for k in range(posted, len(ids)) if scored[k] <= now]
            for lo in range(0, len(new), 10_000):
                part = new[lo:lo + 10_000]
                preds = [{"id": ids[k], "probability": float(p[k]), "scored_at": iso(scored[k])}
                         for k in part]
                assert client.post("/v1/models/late/predictions",
                                   json={"predictions": preds}).status_code == 200
            posted += len(new)
            _post(client, ids, y, observed, last, now)
            last = now
            refresh(client)
            periods = _weeks(client, now)
            states = set()
            for index, period in enumerate(periods):
                if period["n_predictions"] == 0 or T0 + timedelta(days=7 * index + 7) > now:
                    continue  # a week without cases yet, or one still open
                truth = _truth(scored, observed, T0 + timedelta(days=7 * index), now)
                level = period["label_completeness"]
                assert abs(level - truth) <= 0.10, (now, period["start"], level, truth)
                assert period["provisional"] is (level < 0.95)
                assert (period["provisional_reason"] is None) is (not period["provisional"])
                states.add(period["provisional"])
            if now == phases[0]:
                assert periods[watched]["provisional"] is True
            if now == phases[1]:
                assert states == {True, False}  # the recent weeks wait, the old ones are final
                delay = client.get("/v1/models/late").json()["outcome_delay"]
                # The right-truncated estimate against the true Gamma quantiles (scipy.stats.gamma.ppf):
                # 10 weeks of history see delays up to 70 days, far past this Gamma's p99 (25.2 days).
                truth_q = stats.gamma(SHAPE, scale=SCALE).ppf([0.5, 0.95])
                assert delay["quantiles_days"]["p50"] == pytest.approx(truth_q[0], rel=0.1)
                assert delay["quantiles_days"]["p95"] == pytest.approx(truth_q[1], rel=0.1)
                assert delay["late_event_share"] is None  # no horizon, no late events
                assert len(delay["by_week"]) == 12
            if now == phases[2]:
                assert periods[watched]["provisional"] is False
