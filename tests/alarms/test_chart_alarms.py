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
from tests.alarms.streams import T0, make_day, post_day, refresh, setup_model
from tests.conftest import Database, make_client

CHARTS = ("calibration-chart-upper", "calibration-chart-lower")
SMALL_DESIGN = {"min_design_cases": 400, "design_sample": 800}
CHANGE_DAY = 6


def _run_stream(db: Database, days: int = 16, per_day: int = 240, seed: int = 11):
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "m", keep=CHARTS, chart_params=SMALL_DESIGN, implicit_negatives=True)
    rng = np.random.default_rng(seed)
    posted = []
    for day in range(days):
        d = make_day(rng, day, per_day, shift_from=CHANGE_DAY)
        post_day(client, "m", d)
        posted.append(d)
        clock.set(T0 + timedelta(days=day + 2, hours=1))  # day's cases mature after H = 1 day
        refresh(client)
    return client, posted


def test_odds_doubling_in_one_segment_opens_one_upper_alarm_after_the_change(db: Database) -> None:
    client, _ = _run_stream(db)
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
    assert ev["statistic"] > ev["control_limit"] == ev["design"]["h"]
    assert ev["design"]["n_charts"] == 6  # 2 rules x (all + north + south)
    assert ev["chart_path"][-1][1] == ev["statistic"]
    # Delay: cases of the south stream between the change and the crossing, vs the chain's ARL1.
    risks = np.random.default_rng(0).beta(2, 8, 4000)
    arl1 = out_of_control_arl(ev["control_limit"], risks, 2.0, 2.0)
    # The south stream has 120 cases a day; its first 400 design the chart, which starts after them.
    after_change = ev["n"] - (CHANGE_DAY * 120 - SMALL_DESIGN["min_design_cases"])
    assert 0 < after_change < 4 * arl1


def test_outbox_holds_the_opened_events_with_the_alarm(db: Database) -> None:
    client, _ = _run_stream(db)
    alarms = client.get("/v1/models/m/alarms").json()["alarms"]
    n_events = db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.opened'")
    assert n_events == len(alarms) >= 1
