"""Horizon, lag and implicit negatives on four hand-made predictions, answers worked by hand.

Model: horizon H = 3 days, reporting lag L = 1 day, so an hourly bucket is
mature when its end + 4 days ≤ now (docs/architecture.md, data semantics).

    case  p    scored_at (UTC)     bucket end        mature from        outcome
    a     0.2  03-02 10:15         03-02 11:00       03-06 11:00        1
    b     0.4  03-02 10:45         03-02 11:00       03-06 11:00        0
    c     0.5  03-02 10:30         03-02 11:00       03-06 11:00        none
    d     0.8  03-04 08:00         03-04 09:00       03-08 09:00        1

All four are in the ISO week starting Monday 2026-03-02. The summaries are
built once; afterwards only the clock moves and no refresh runs.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta

import pytest

from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.rollup.synthetic import refresh

MODEL = "hand"
WEEK = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-09T00:00:00Z", "granularity": "week"}
FIRST_MATURE = datetime(2026, 3, 6, 11, tzinfo=UTC)
ALL_MATURE = datetime(2026, 3, 8, 9, tzinfo=UTC)
PREDICTIONS = [
    {"id": "a", "probability": 0.2, "scored_at": "2026-03-02T10:15:00Z"},
    {"id": "b", "probability": 0.4, "scored_at": "2026-03-02T10:45:00Z"},
    {"id": "c", "probability": 0.5, "scored_at": "2026-03-02T10:30:00Z"},
    {"id": "d", "probability": 0.8, "scored_at": "2026-03-04T08:00:00Z"},
]
OUTCOMES = [
    {"id": "a", "label": 1, "observed_at": "2026-03-03T00:00:00Z"},
    {"id": "b", "label": 0, "observed_at": "2026-03-03T00:00:00Z"},
    {"id": "d", "label": 1, "observed_at": "2026-03-05T00:00:00Z"},
]


def week(client) -> dict:
    r = client.get(f"/v1/models/{MODEL}/metrics", params=WEEK)
    assert r.status_code == 200, r.text
    (period,) = r.json()["periods"]
    return period


def backlog(db: Database) -> int:
    return int(db.scalar("SELECT COUNT(*) FROM dirty_buckets"))


@pytest.fixture
def setup(db: Database):
    clock = FixedClock(datetime(2026, 3, 5, tzinfo=UTC))
    with make_client(db, clock=clock) as client:
        r = client.put(f"/v1/models/{MODEL}", json={"outcome_horizon_days": 3, "outcome_lag_days": 1})
        assert r.status_code in (200, 201), r.text
        r = client.post(f"/v1/models/{MODEL}/predictions", json={"predictions": PREDICTIONS})
        assert r.status_code == 200, r.text
        r = client.post(f"/v1/models/{MODEL}/outcomes", json={"outcomes": OUTCOMES})
        assert r.status_code == 200, r.text
        refresh(client)
        yield client, clock


def test_period_matures_as_the_clock_moves_without_recomputation(db: Database, setup) -> None:
    client, clock = setup
    clock.set(FIRST_MATURE - timedelta(seconds=1))
    p = week(client)
    # nothing mature: every prediction counted as immature, no label metric yet
    assert (p["n_predictions"], p["n_immature"], p["n_labeled"]) == (4, 4, 3)
    assert p["label_coverage"] == pytest.approx(3 / 4)
    assert p["mean_probability"] == pytest.approx((0.2 + 0.4 + 0.5 + 0.8) / 4)  # 0.475, all rows
    for key in ("observed_rate", "log_loss", "brier", "oe_ratio"):
        assert p[key] is None
        assert p["status"][key]["state"] == "too_few_cases"

    assert backlog(db) == 0  # time passing needs no refresh: nothing is marked
    clock.set(FIRST_MATURE)  # exactly bucket end + H + L: mature ("≤ now")
    p = week(client)
    assert (p["n_predictions"], p["n_immature"], p["n_labeled"]) == (4, 1, 3)
    # mature and labeled: a (0.2, y=1), b (0.4, y=0); c has no outcome and is left out
    assert p["observed_rate"] == pytest.approx(1 / 2)
    assert p["oe_ratio"] == pytest.approx(1 / (0.2 + 0.4))  # 1.6667
    assert p["brier"] == pytest.approx(((0.2 - 1) ** 2 + 0.4**2) / 2)  # (0.64 + 0.16)/2 = 0.4
    assert p["log_loss"] == pytest.approx((-math.log(0.2) - math.log(0.6)) / 2)  # 1.0601
    assert p["mean_probability"] == pytest.approx(0.475)  # still every prediction

    assert backlog(db) == 0
    clock.set(ALL_MATURE)
    p = week(client)
    assert p["n_immature"] == 0
    # a, b, d: observed 2/3, Brier (0.64 + 0.16 + 0.04)/3 = 0.28
    assert p["observed_rate"] == pytest.approx(2 / 3)
    assert p["brier"] == pytest.approx(0.28)
    assert p["log_loss"] == pytest.approx((-math.log(0.2) - math.log(0.6) - math.log(0.8)) / 3)
    assert backlog(db) == 0


def test_implicit_negatives_count_mature_unlabeled_rows_as_zero(db: Database, setup) -> None:
    client, clock = setup
    r = client.put(f"/v1/models/{MODEL}", json={"implicit_negatives": True})
    assert r.status_code == 200, r.text
    assert backlog(db) > 0  # the setting marks the model's buckets for a rebuild
    refresh(client)

    clock.set(FIRST_MATURE)
    p = week(client)
    # mature: a (y=1), b (y=0), c (no outcome → 0); d immature is excluded
    assert p["n_immature"] == 1
    assert p["observed_rate"] == pytest.approx(1 / 3)
    assert p["brier"] == pytest.approx((0.64 + 0.16 + 0.25) / 3)  # c adds (0.5 − 0)² = 0.25
    assert p["oe_ratio"] == pytest.approx(1 / (0.2 + 0.4 + 0.5))
    assert p["n_labeled"] == 3  # implicit negatives are not outcomes
    assert p["label_coverage"] == pytest.approx(3 / 4)

    clock.set(ALL_MATURE)
    p = week(client)
    # a, b, c(0), d: observed 2/4, Brier (0.64 + 0.16 + 0.25 + 0.04)/4 = 0.2725
    assert p["observed_rate"] == pytest.approx(0.5)
    assert p["brier"] == pytest.approx(0.2725)
    assert p["log_loss"] == pytest.approx(
        (-math.log(0.2) - math.log(0.6) - math.log(0.5) - math.log(0.8)) / 4
    )


def test_without_horizon_everything_counts_at_once(db: Database) -> None:
    clock = FixedClock(datetime(2026, 3, 5, tzinfo=UTC))
    with make_client(db, clock=clock) as client:
        client.post(f"/v1/models/{MODEL}/predictions", json={"predictions": PREDICTIONS})
        client.post(f"/v1/models/{MODEL}/outcomes", json={"outcomes": OUTCOMES})
        refresh(client)
        p = week(client)
    # no horizon: nothing is immature; labeled a, b, d → observed 2/3
    assert p["n_immature"] == 0
    assert p["observed_rate"] == pytest.approx(2 / 3)
