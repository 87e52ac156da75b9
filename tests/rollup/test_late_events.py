"""Late events and ``occurred_at`` with a horizon, on both databases.

A model with horizon 7 days, lag 1 and implicit negatives; 8 weeks of 90 cases a
day. 90 % of events are reported within horizon + lag (lognormal, median 2 days,
truncated to 8 days), 10 % are late: reported 8 + Exp(mean 5) days after
scoring, though they happened inside the horizon. Some non-events are reported
as 1 with an ``occurred_at`` after the horizon: they count as 0. Expected values
are counted directly from the simulated cases: the late share among all events
(also those not reported yet), the events counted in each mature week.
"""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pytest
from scipy import stats

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, iso, refresh
from tests.conftest import make_client

H, L = 7, 1
DAYS, PER_DAY = 56, 90


def _stream(seed: int):
    rng = np.random.default_rng(seed)
    n = DAYS * PER_DAY
    day = np.repeat(np.arange(DAYS), PER_DAY)
    scored = [T0 + timedelta(days=int(d), seconds=int(s))
              for d, s in zip(day, rng.integers(0, 2 * 3600, n), strict=True)]
    p = rng.beta(2, 8, n)
    event = rng.random(n) < p
    lognormal = stats.lognorm(0.9, scale=2.0)
    delay = lognormal.ppf(rng.random(n) * lognormal.cdf(H + L))  # inverse CDF, truncated to H + L
    late = event & (rng.random(n) < 0.10)
    delay[late] = H + L + rng.exponential(5.0, int(late.sum()))
    occurred = np.where(late, rng.uniform(0, H, n), delay / 2)  # inside the horizon, before the report
    # 3 % of non-events are reported as 1 that happened after the horizon: a 0 for the model.
    after_horizon = ~event & (rng.random(n) < 0.03)
    delay[after_horizon] = H + 0.6
    occurred[after_horizon] = H + 0.5
    return scored, p, event, delay, occurred, late, after_horizon


@pytest.mark.parametrize("db", ["sqlite", "postgresql"], indirect=True)
def test_late_events_count_as_events_and_their_share_is_measured(db) -> None:
    scored, p, event, delay, occurred, late, after_horizon = _stream(7)
    now = T0 + timedelta(days=DAYS)
    reported = [(event[k] or after_horizon[k]) and scored[k] + timedelta(days=float(delay[k])) <= now
                for k in range(len(scored))]
    with make_client(db, clock=FixedClock(now)) as client:
        body = {"outcome_horizon_days": H, "outcome_lag_days": L, "implicit_negatives": True}
        assert client.put("/v1/models/late", json=body).status_code == 201
        preds = [{"id": f"c{k}", "probability": float(p[k]), "scored_at": iso(t)}
                 for k, t in enumerate(scored)]
        assert client.post("/v1/models/late/predictions", json={"predictions": preds}).status_code == 200
        outcomes = [{"id": f"c{k}", "label": 1,
                     "observed_at": iso(scored[k] + timedelta(days=float(delay[k]))),
                     "occurred_at": iso(scored[k] + timedelta(days=float(occurred[k])))}
                    for k in range(len(scored)) if reported[k]]
        assert client.post("/v1/models/late/outcomes", json={"outcomes": outcomes}).status_code == 200
        refresh(client)

        model = client.get("/v1/models/late").json()
        delay_out = model["outcome_delay"]
        truth = late.sum() / event.sum()  # over every event, reported yet or not
        assert delay_out["late_event_share"] == pytest.approx(truth, abs=0.03)
        seen_late = sum(1 for k in range(len(scored)) if reported[k] and late[k])
        assert delay_out["late_events"] == seen_late
        assert sum(w["late_events"] for w in delay_out["by_week"]) == seen_late
        # 10 % late > 2 %: the rules wait for the p95 delay, beyond horizon + lag
        assert delay_out["complete_after_days"] == pytest.approx(delay_out["quantiles_days"]["p95"])
        assert delay_out["complete_after_days"] > H + L

        r = client.get("/v1/models/late/metrics", params={
            "start": iso(T0), "end": iso(T0 + timedelta(days=28)), "granularity": "week"})
        assert r.status_code == 200, r.text
        for w, period in enumerate(r.json()["periods"]):
            in_week = [k for k, t in enumerate(scored) if T0 + timedelta(days=7 * w) <= t
                       < T0 + timedelta(days=7 * w + 7)]
            counted = sum(1 for k in in_week if reported[k] and event[k])  # after-horizon 1s are 0s
            assert period["n_immature"] == 0
            assert round(period["observed_rate"] * period["n_predictions"]) == counted
            # Old weeks: almost every late event is in; completeness is F at ≥ 4 weeks of age.
            assert period["label_completeness"] > 0.95
            assert period["provisional"] is False

        case = next(k for k in range(len(scored)) if reported[k] and after_horizon[k])
        shown = client.get(f"/v1/models/late/cases/c{case}").json()["outcome"]
        sent = scored[case] + timedelta(days=float(occurred[case]))
        assert datetime.fromisoformat(shown["occurred_at"].replace("Z", "+00:00")) == sent
