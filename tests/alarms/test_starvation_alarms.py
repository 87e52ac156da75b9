"""The default feed-starvation rule through the API: silence, and mature predictions without outcomes.

Rule (``feed-starvation``, StarvationParams defaults): fire when the last
prediction is more than 24 h old, or when more than half of the last 7 days'
mature predictions (at least 50) have no outcome. It is a deterministic
condition on the feeds, so every expected figure is counted from the test's own
rows: the silence from the latest ``scored_at`` the test posted, the share with
pandas over the predictions whose scored hour is mature (hour end + H ≤ now,
docs/architecture.md) and lies in the 7 days that end with the newest mature hour. It is checked
at every evaluation and resolves itself once the feeds are healthy.
"""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, Day, make_day, post_day, post_outcomes, refresh, setup_model
from tests.conftest import Database, make_client

RULE = "feed-starvation"
MAX_SILENCE_H, MAX_SHARE, WINDOW = 24.0, 0.5, timedelta(days=7)  # the rule's defaults
HORIZON = timedelta(days=1)  # setup_model's outcome horizon


def _alarms(client: TestClient) -> list[dict]:
    r = client.get("/v1/models/s/alarms", params={"rule": RULE})
    assert r.status_code == 200, r.text
    return r.json()["alarms"]


def _recent(rng: np.random.Generator, day: int, at: list[datetime]) -> Day:
    """Predictions scored at the given instants (no outcomes are posted for them)."""
    return Day(day, [f"r{day}-{i}" for i in range(len(at))], rng.beta(2, 8, len(at)),
               np.zeros(len(at), dtype=int), ["north"] * len(at), at)


def _model(db: Database) -> tuple[TestClient, FixedClock]:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "s", keep=(RULE,))
    return client, clock


def test_silence_longer_than_allowed_fires_and_new_predictions_resolve(db: Database) -> None:
    client, clock = _model(db)
    rng = np.random.default_rng(4)
    days = [make_day(rng, day, 40) for day in range(14)]
    for d in days:
        post_day(client, "s", d)  # normal traffic: every case gets its outcome
    last = max(max(d.scored_at) for d in days)

    clock.set(T0 + timedelta(days=14, hours=1))
    refresh(client)
    assert _alarms(client) == []  # an hour or two of quiet, outcomes all there

    clock.set(T0 + timedelta(days=15, hours=2))
    refresh(client)
    refresh(client)  # still one alarm: at most one open per (rule, version, segment)
    (alarm,) = _alarms(client)
    assert alarm["state"] == "open"
    detail = alarm["evidence"]["detail"]
    silence = (clock.now() - last).total_seconds() / 3600  # from the test's own timestamps
    assert silence > MAX_SILENCE_H
    assert detail["silence_hours"] == pytest.approx(silence, rel=1e-12)
    assert detail["silent"] is True
    assert detail["outcomes_missing"] is False
    assert detail["unlabeled_share"] == 0.0

    post_day(client, "s", _recent(rng, 15, [clock.now() - timedelta(minutes=30)]), outcomes=False)
    refresh(client)
    (alarm,) = _alarms(client)
    assert alarm["state"] == "resolved"
    assert alarm["resolved_by"] == "system"
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.opened'") == 1
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.resolved'") == 1


def test_mature_predictions_without_outcomes_fire_until_the_outcomes_arrive(db: Database) -> None:
    client, clock = _model(db)
    rng = np.random.default_rng(6)
    frames = []
    starved = {}
    for day in (0, 1, 2, 10, 11, 12):  # days 0–2 fall outside the 7-day window and are all labeled
        d = make_day(rng, day, 40)
        post_day(client, "s", d, outcomes=False)
        labeled = np.arange(40) if day < 3 else np.flatnonzero(rng.random(40) < 0.3)
        post_outcomes(client, "s", d, labeled)
        starved[day] = (d, sorted(set(range(40)) - set(labeled.tolist())))
        frames.append(pd.DataFrame({"scored_at": pd.to_datetime(d.scored_at, utc=True),
                                    "labeled": np.isin(np.arange(40), labeled)}))
    now = T0 + timedelta(days=15)
    # Fresh, still immature predictions keep the feed from being silent.
    fresh = [T0 + timedelta(days=14, hours=6 + h) for h in range(12)]
    post_day(client, "s", _recent(rng, 14, fresh), outcomes=False)
    frames.append(pd.DataFrame({"scored_at": pd.to_datetime(fresh, utc=True), "labeled": False}))
    # Either side of the maturity boundary: the newest mature hour (13 d 23 h) counts in the
    # window, the first immature one (14 d 00 h) does not.
    edge = [T0 + timedelta(days=13, hours=23, minutes=m) for m in (5, 35)] + \
        [T0 + timedelta(days=14, minutes=m) for m in (5, 35)]
    post_day(client, "s", _recent(rng, 13, edge), outcomes=False)
    frames.append(pd.DataFrame({"scored_at": pd.to_datetime(edge, utc=True), "labeled": False}))
    rows = pd.concat(frames, ignore_index=True)
    # Mature: scored hour ends at least H before now; the window is the 7 days ending with the
    # newest mature hour, so it stops where the first immature hour begins.
    first_immature = pd.Timestamp(now - HORIZON)
    window = rows[(rows.scored_at >= first_immature - pd.Timedelta(WINDOW))
                  & (rows.scored_at < first_immature)]
    share = float((~window.labeled).mean())  # pandas
    assert share > MAX_SHARE

    clock.set(now)
    refresh(client)
    (alarm,) = _alarms(client)
    detail = alarm["evidence"]["detail"]
    assert detail["outcomes_missing"] is True
    assert detail["silent"] is False
    assert detail["mature"] == len(window)
    assert detail["unlabeled_share"] == pytest.approx(share, rel=1e-12)

    for d, missing in starved.values():
        if missing:
            post_outcomes(client, "s", d, missing)
    clock.advance(timedelta(minutes=10))
    refresh(client)
    (alarm,) = _alarms(client)
    assert alarm["state"] == "resolved"
    assert alarm["resolution"]["reason"] == "feeds healthy again"
