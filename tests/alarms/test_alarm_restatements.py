"""A window alarm keeps its evidence and gains a restatement when later outcomes change its period.

The weekly excess log-loss rule fires on a week whose true odds are 2.5 times the
model's (as in tests/alarms/test_window_alarms.py) while a fifth of that week's
outcomes are still missing; they are reported a week later. The alarm's evidence
stays what the rule saw (its n is the week's labeled cases then), and GET of the
alarm shows one restatement with the week's full count — counted directly from
what was posted — and whether the week still crosses. Another refresh with nothing
new adds nothing.
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, make_day, post_day, post_outcomes, refresh, setup_model
from tests.conftest import Database, make_client

RULE = "excess-log-loss-weekly"


@pytest.mark.parametrize("db", ["sqlite", "postgresql"], indirect=True)
def test_later_outcomes_restate_a_window_alarm_without_rewriting_its_evidence(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "w", keep=(RULE,), chart_params=None)
    rng = np.random.default_rng(5)
    withheld = []
    for day in range(14):
        d = make_day(rng, day, 60)
        if day >= 7:  # week 1: odds x2.5 (Steiner et al. 2000 odds shift)
            q = 2.5 * d.p / (1 - d.p + 2.5 * d.p)
            d.y = (rng.random(d.p.size) < q).astype(int)
        post_day(client, "w", d, outcomes=False)
        keep = range(len(d.ids)) if day < 7 else range(12, len(d.ids))
        post_outcomes(client, "w", d, keep)
        if day >= 7:
            withheld.append(d)
    clock.set(T0 + timedelta(days=15, hours=2))  # week 1 ends at day 14, matures a day later
    refresh(client)
    alarms = client.get("/v1/models/w/alarms", params={"rule": RULE}).json()["alarms"]
    alarm = next(a for a in alarms if a["segment"] is None)
    assert alarm["evidence"]["period_start"].startswith("2026-03-09")
    assert alarm["evidence"]["n"] == 7 * 48
    assert alarm["evidence"]["label_completeness"] is not None
    assert alarm["restatements"] == []

    clock.set(T0 + timedelta(days=22))
    for d in withheld:  # the missing fifth, reported a week late
        items = [{"id": d.ids[i], "label": int(d.y[i]), "observed_at": "2026-03-23T23:00:00Z"}
                 for i in range(12)]
        assert client.post("/v1/models/w/outcomes", json={"outcomes": items}).status_code == 200
    refresh(client)
    again = client.get(f"/v1/models/w/alarms/{alarm['id']}").json()
    assert again["evidence"] == alarm["evidence"]  # what the rule saw, kept
    assert len(again["restatements"]) == 1
    entry = again["restatements"][0]
    assert entry["n"] == 7 * 60
    assert entry["statistic"] != alarm["evidence"]["statistic"]
    assert entry["still_crosses"] is True
    assert entry["at"].startswith("2026-03-24")

    clock.advance(timedelta(hours=2))
    refresh(client)
    assert len(client.get(f"/v1/models/w/alarms/{alarm['id']}").json()["restatements"]) == 1
