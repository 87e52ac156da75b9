"""Chart alarms end to end: a stream whose odds double in one segment from a known day.

Expected behaviour from the chart's definition (Steiner et al. 2000,
doi:10.1093/biostatistics/1.4.441): the upper (R_A = 2) chart of the shifted
segment signals after the change and roughly within its out-of-control ARL
(Brook & Evans 1972 chain, ``stats.cusum_design.out_of_control_arl``); charts on
unshifted streams stay quiet at a one-per-year design.
"""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np

from calibrant.clock import FixedClock
from calibrant.stats.cusum_design import out_of_control_arl
from tests.alarms.streams import T0, make_day, post_day, post_outcomes, refresh, setup_model
from tests.conftest import Database, make_client

CHARTS = ("calibration-chart-upper", "calibration-chart-lower")
SMALL_DESIGN = {"min_design_cases": 400, "design_sample": 800}
CHANGE_DAY = 6


def _run_stream(db: Database, days: int = 16, per_day: int = 240, seed: int = 11):
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "m", keep=CHARTS, chart_params=SMALL_DESIGN, implicit_negatives=True)
    rng = np.random.default_rng(seed)
    for day in range(days):
        post_day(client, "m", make_day(rng, day, per_day, shift_from=CHANGE_DAY))
        clock.set(T0 + timedelta(days=day + 2, hours=1))  # day's cases mature after H = 1 day
        if day % 2 or day == days - 1:  # evaluating every other day keeps the test short
            refresh(client)
    return client, clock


def test_odds_doubling_in_one_segment_alarm_outbox_resolve_restart_and_backtest(db: Database) -> None:
    client, clock = _run_stream(db)
    alarms = client.get("/v1/models/m/alarms").json()["alarms"]
    keys = {(a["rule"], a["version"], a["segment"]["value"] if a["segment"] else "all") for a in alarms}
    assert ("calibration-chart-upper", "default", "south") in keys
    # Nothing on the unshifted segment, nor on the lower side of the shifted one.
    assert not {k for k in keys if k[2] == "north" or k[0] == "calibration-chart-lower"}
    assert len(alarms) == len(keys)  # one alarm per (rule, version, segment)
    south = next(a for a in alarms if a["segment"] and a["segment"]["value"] == "south")
    ev = south["evidence"]
    change_matures = T0 + timedelta(days=CHANGE_DAY + 1, hours=1)
    crossed = datetime.fromisoformat(ev["crossed_at"].replace("Z", "+00:00"))
    assert crossed >= change_matures
    assert ev["statistic"] > ev["control_limit"] == ev["design"]["control_limit"]
    # The rule's own streams (all + north + south) share the rule's half of the budget: the two
    # chart rules are the only ones enabled, with equal weights (docs/methods.md §18.5).
    assert ev["design"]["n_charts"] == 3
    assert ev["budget_share_per_year"] == ev["design"]["budget_share_per_year"] == 0.5
    assert south["budget_share_per_year"] == 0.5
    assert ev["chart_path"][-1][1] == ev["statistic"]
    # Delay: cases of the south stream between the change and the crossing, vs the chain's ARL1.
    risks = np.random.default_rng(0).beta(2, 8, 4000)
    arl1 = out_of_control_arl(ev["control_limit"], risks, 2.0, 2.0)
    # The south stream has 120 cases a day; its first 400 design the chart, which starts after them.
    after_change = ev["n"] - (CHANGE_DAY * 120 - SMALL_DESIGN["min_design_cases"])
    assert 0 < after_change < 4 * arl1

    # Every opened alarm has its event in the outbox (written in the same transaction).
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.opened'") == len(alarms)
    # Refreshing again opens nothing new while the alarm is open.
    refresh(client)
    assert len(client.get("/v1/models/m/alarms").json()["alarms"]) == len(alarms)

    # A backtest over the same history finds the same crossing and writes nothing.
    events_before = db.scalar("SELECT count(*) FROM outbox_events")
    bt = client.post("/v1/models/m/rules/calibration-chart-upper/backtest",
                     params={"start": "2026-03-01T00:00:00Z", "end": "2026-04-01T00:00:00Z"}).json()
    assert bt["sent"] == 0
    assert bt["crossing_count"] >= 1
    assert any(f["segment"] == {"key": "region", "value": "south"} for f in bt["crossings"])
    assert db.scalar("SELECT count(*) FROM outbox_events") == events_before
    assert db.scalar("SELECT count(*) FROM alarms") == len(alarms)

    # Resolving is audited, announced, and restarts the chart at S = 0.
    r = client.post(f"/v1/models/m/alarms/{south['id']}/resolve", json={"note": "checked"})
    assert r.status_code == 200
    assert r.json()["state"] == "resolved"
    assert client.post(f"/v1/models/m/alarms/{south['id']}/resolve", json={}).status_code == 409
    assert db.scalar("SELECT count(*) FROM audit_events WHERE action = 'alarm.resolved'") == 1
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.resolved'") == 1
    rule = client.get("/v1/models/m/rules/calibration-chart-upper").json()
    stream = next(s for s in rule["streams"] if s["segment"] == {"key": "region", "value": "south"})
    assert stream["cusum_statistic"] == 0.0
    assert stream["cases_since_reset"] == 0
    # The shift persists, so the restarted chart signals again: a second alarm on the same key.
    rng = np.random.default_rng(99)
    for day in range(16, 24):
        post_day(client, "m", make_day(rng, day, 240, shift_from=CHANGE_DAY))
        clock.set(T0 + timedelta(days=day + 2, hours=1))
        refresh(client)
    south_alarms = client.get("/v1/models/m/alarms", params={"tag": "region:south",
                                                             "rule": "calibration-chart-upper"}).json()
    assert [a["state"] for a in south_alarms["alarms"]] == ["open", "resolved"]


def test_outcomes_behind_the_watermark_are_counted_as_skipped_late(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "late", keep=CHARTS, chart_params=SMALL_DESIGN)
    d = make_day(np.random.default_rng(5), 0, 60)
    post_day(client, "late", d, outcomes=False)
    post_outcomes(client, "late", d, range(40))  # 20 cases still without an outcome at maturity
    clock.set(T0 + timedelta(days=2, hours=1))
    refresh(client)
    clock.advance(timedelta(hours=1))
    post_outcomes(client, "late", d, range(40, 60))
    clock.advance(timedelta(hours=1))
    refresh(client)
    rule = client.get("/v1/models/late/rules/calibration-chart-upper").json()
    everything = next(s for s in rule["streams"] if s["segment"] is None)
    assert everything["consumed"] == 60
    assert everything["unlabeled_at_maturity"] == 20
    assert everything["skipped_late"] == 20
    south = next(s for s in rule["streams"] if s["segment"] == {"key": "region", "value": "south"})
    assert south["skipped_late"] == sum(1 for i in range(40, 60) if d.region[i] == "south")
