"""A label corrected after a chart consumed its case is never fed to the chart again.

The chart's processing order is defined once per case (docs/methods.md §18: order of
maturity, reproducible): the end of its scored hour + H + L, or + L without a horizon
(then read once its age passes the measured p95 delay, docs/methods.md §23). A
correction, whatever its ``observed_at``, arrives behind the stream's watermark and is
counted as skipped-late, not consumed twice — with a horizon and without one.
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
from fastapi.testclient import TestClient

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, iso, make_day, post_day, refresh, setup_model
from tests.conftest import Database, make_client

CHARTS = ("calibration-chart-upper",)
SMALL_DESIGN = {"min_design_cases": 400, "design_sample": 800}
CORRECTED = (3, 17, 41)  # cases of day 0 whose label is flipped after the chart consumed them


def _stream(client: TestClient, model: str) -> dict:
    rule = client.get(f"/v1/models/{model}/rules/calibration-chart-upper").json()
    return next(s for s in rule["streams"] if s["segment"] is None)


def _correct(client: TestClient, model: str, d, observed_after: timedelta) -> None:
    items = [{"id": d.ids[i], "label": 1 - int(d.y[i]), "observed_at": iso(d.scored_at[i] + observed_after)}
             for i in CORRECTED]
    r = client.post(f"/v1/models/{model}/outcomes", json={"outcomes": items})
    assert r.status_code == 200, r.text
    assert r.json()["corrected"] == len(CORRECTED)


def _consume_then_correct(db: Database, **settings) -> tuple[TestClient, FixedClock, int]:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "fix", keep=CHARTS, chart_params=SMALL_DESIGN, **settings)
    d = make_day(np.random.default_rng(21), 0, 80)
    post_day(client, "fix", d)  # outcomes observed 6 h after scoring
    clock.set(T0 + timedelta(days=2, hours=1))
    refresh(client)
    assert _stream(client, "fix")["consumed"] == len(d.ids)
    # Corrections observed two days later: past the watermark of the first run.
    clock.set(T0 + timedelta(days=3))
    _correct(client, "fix", d, observed_after=timedelta(days=2, hours=12))
    clock.set(T0 + timedelta(days=4))
    refresh(client)
    refresh(client)  # a second run must change nothing either
    return client, clock, len(d.ids)


def test_corrected_label_without_horizon_is_not_consumed_twice(db: Database) -> None:
    client, _, n = _consume_then_correct(db, outcome_horizon_days=None)
    stream = _stream(client, "fix")
    assert stream["consumed"] == n  # each case fed once
    assert stream["skipped_late"] == len(CORRECTED)  # the corrections, counted once each


def test_corrected_label_with_horizon_is_counted_late(db: Database) -> None:
    client, _, n = _consume_then_correct(db, outcome_horizon_days=1)
    stream = _stream(client, "fix")
    assert stream["consumed"] == n
    assert stream["skipped_late"] == len(CORRECTED)


def test_label_corrected_before_the_chart_saw_it_is_fed_once(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "early", keep=CHARTS, chart_params=SMALL_DESIGN, outcome_horizon_days=None)
    d = make_day(np.random.default_rng(22), 0, 80)
    post_day(client, "early", d)
    clock.set(T0 + timedelta(days=3))
    _correct(client, "early", d, observed_after=timedelta(days=2, hours=12))
    clock.set(T0 + timedelta(days=4))
    refresh(client)
    refresh(client)
    stream = _stream(client, "early")
    assert stream["consumed"] == len(d.ids)
    assert stream["skipped_late"] == 0


def test_label_corrected_inside_the_lag_before_the_chart_saw_it_is_fed_once(db: Database) -> None:
    # No horizon, lag L = 1 day: a case matures L after its scored hour and is read once its
    # age also passes the p95 delay (6 h here). The corrections below are observed within the
    # last L days when the chart first runs; the cases matured long before, so each is fed
    # once, with its corrected label.
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "lagged", keep=CHARTS, chart_params=SMALL_DESIGN, outcome_horizon_days=None,
                outcome_lag_days=1)
    d = make_day(np.random.default_rng(23), 0, 80)
    post_day(client, "lagged", d)
    clock.set(T0 + timedelta(days=4))
    _correct(client, "lagged", d, observed_after=timedelta(days=3))  # observed in [T0+3d, T0+4d)
    refresh(client)
    refresh(client)
    stream = _stream(client, "lagged")
    assert stream["consumed"] == len(d.ids)
    assert stream["skipped_late"] == 0
