"""A seeded service for the page tests: a model whose odds double in one segment, and its alarm.

The stream of ``tests/alarms/streams.py`` (Steiner et al. 2000's odds shift, q = 2p/(1 − p + 2p)),
sized as tests/alarms/test_chart_alarms.py sizes it: 16 days of 240 cases, the south region's
odds doubled from day 6, the upper calibration chart with a small design (400 cases). That test
shows the upper chart of south crossing (and the lower one quiet); here it is what the pages
must show. Only the upper chart is kept, and the jobs run every fourth day: each chart design
solves Markov chains for about a second, and the page tests need one alarm, not the lower chart.
A webhook receiver on loopback (recorded, not sent) gives the alarm page its deliveries.
A second model with a few unlabeled predictions shows that the overview lists every model.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta

import numpy as np
from fastapi.testclient import TestClient

from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.notify.senders import RecordingSender
from tests.alarms.streams import T0, iso, make_day, post_day, refresh, setup_model
from tests.conftest import REPLAY_TOLERANCE_HOURS, Database
from tests.notify.helpers import loopback_resolver

MODEL = "parcel-risk"
QUIET_MODEL = "quiet-model"
DRIFTING = ("region", "south")
CHARTS = ("calibration-chart-upper",)
SMALL_DESIGN = {"min_design_cases": 400, "design_sample": 800}
DAYS, PER_DAY, CHANGE_DAY, SEED = 16, 240, 6, 11
# The stream is posted ahead of the fixed clock, which then advances (see tests/conftest.py).
SETTINGS = {"webhook_allow_private": True, "future_tolerance_hours": REPLAY_TOLERANCE_HOURS}


@dataclass(frozen=True)
class Seeded:
    clock: FixedClock
    now: datetime
    alarm_id: int  # the drifting segment's alarm
    crossing_case: str  # the case at which its chart crossed
    open_alarms: int  # the pooled "all cases" chart, which contains the segment, may alarm too


def seed(db: Database) -> Seeded:
    clock = FixedClock(T0)
    app = create_app(db.settings(**SETTINGS), engine=db.engine, clock=clock,
                     webhook_sender=RecordingSender(), resolver=loopback_resolver)
    with TestClient(app) as client:
        setup_model(client, MODEL, keep=CHARTS, chart_params=SMALL_DESIGN, implicit_negatives=True,
                    description="Invented: will a parcel miss its promised day?")
        created = client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "model": MODEL})
        assert created.status_code == 201, created.text
        rng = np.random.default_rng(SEED)
        for day in range(DAYS):
            post_day(client, MODEL, make_day(rng, day, PER_DAY, shift_from=CHANGE_DAY))
            clock.set(T0 + timedelta(days=day + 2, hours=1))  # the day's cases mature after 1 day
            if day % 4 == 3:
                refresh(client)
        quiet = [{"id": f"q{i}", "probability": 0.2, "scored_at": iso(clock.now() - timedelta(hours=2))}
                 for i in range(5)]
        posted = client.post(f"/v1/models/{QUIET_MODEL}/predictions", json={"predictions": quiet})
        assert posted.status_code == 200, posted.text
        alarms = client.get(f"/v1/models/{MODEL}/alarms", params={"state": "open"}).json()["alarms"]
    drifting = [a for a in alarms if a["segment"] == {"key": DRIFTING[0], "value": DRIFTING[1]}]
    assert [a["rule"] for a in drifting] == ["calibration-chart-upper"], alarms
    alarm = drifting[0]
    return Seeded(clock, clock.now(), alarm["id"], alarm["evidence"]["crossing_case"], len(alarms))
