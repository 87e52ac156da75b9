"""The weekly excess log-loss rule on closed, mature weeks; backtest; automatic resolution.

Expected behaviour from the definition (excess log-loss D = LL − E0[LL], whose
null variance is Σ p(1 − p) logit(p)²/n², docs/methods.md §5): calibrated
predictions keep E[D] = 0 whatever their risk distribution, so a week of a
calibrated model with a different case mix does not fire, while a week whose
true odds are 2.5 times the model's does; the next calibrated week resolves
the alarm. What is not claimed: for a miscalibrated model E[D] = −Σ(q − p)·
logit(p)/n depends on the mix, so a case-mix change alone can move D away from
the reference's and fire (tests/alarms/test_excess_log_loss_kind.py shows it).
"""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, make_day, post_day, post_outcomes, refresh, setup_model
from tests.conftest import Database, make_client

RULE = "excess-log-loss-weekly"


def _post_weeks(client, rng) -> None:
    # Week 0: Beta(2,8) calibrated; week 1: Beta(5,5) calibrated (case mix only);
    # week 2: odds x2.5 everywhere; week 3: calibrated again.
    plan = {0: ((2, 8), 1.0), 1: ((5, 5), 1.0), 2: ((2, 8), 2.5), 3: ((2, 8), 1.0)}
    for week, (beta, odds_ratio) in plan.items():
        for day in range(7 * week, 7 * week + 7):
            d = make_day(rng, day, 60, beta=beta)
            q = odds_ratio * d.p / (1 - d.p + odds_ratio * d.p)  # Steiner et al. (2000) odds shift
            d.y = (rng.random(d.p.size) < q).astype(int)
            post_day(client, "w", d)


def test_weekly_rule_fires_on_degradation_not_on_a_calibrated_mix_change_and_resolves(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "w", keep=(), chart_params=None)
    _post_weeks(client, np.random.default_rng(3))
    clock.set(T0 + timedelta(days=29, hours=2))  # week 3 ends at day 28, matures a day later
    refresh(client)  # rule disabled: summaries only

    bt = client.post(f"/v1/models/w/rules/{RULE}/backtest",
                     params={"start": "2026-03-02T00:00:00Z", "end": "2026-03-30T00:00:00Z"})
    assert bt.status_code == 200, bt.text
    crossings = bt.json()["crossings"]
    assert {f["segment"] and f["segment"]["value"] for f in crossings} <= {None, "north", "south"}
    assert {f["crossed_at"][:10] for f in crossings} == {"2026-03-23"}  # only the degraded week
    assert db.scalar("SELECT count(*) FROM alarms") == 0
    assert db.scalar("SELECT count(*) FROM outbox_events") == 0

    assert client.put(f"/v1/models/w/rules/{RULE}", json={"enabled": True}).status_code == 200
    refresh(client)
    alarms = client.get("/v1/models/w/alarms", params={"rule": RULE}).json()["alarms"]
    everything = [a for a in alarms if a["segment"] is None]
    assert len(everything) == 1
    alarm = everything[0]
    assert alarm["evidence"]["period_start"].startswith("2026-03-16")
    assert alarm["evidence"]["detail"]["z"] > alarm["evidence"]["detail"]["z_critical"]
    assert alarm["evidence"]["n"] == 420
    # Week 3 is calibrated again: resolved automatically, both changes announced.
    assert alarm["state"] == "resolved"
    assert alarm["resolved_by"] == "system"
    assert alarm["resolution"]["period_start"].startswith("2026-03-23")
    n_alarms = len(alarms)
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.opened'") == n_alarms
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.resolved'") == n_alarms
    # Each period is evaluated once: another refresh changes nothing.
    refresh(client)
    assert len(client.get("/v1/models/w/alarms").json()["alarms"]) == n_alarms


def test_implicit_negatives_drift_against_a_traffic_reference_raises_the_statistic(db: Database) -> None:
    """With implicit negatives only events are posted; a mature prediction without one is a 0.

    The traffic reference must be counted the same way (every mature prediction,
    unlabeled ones as 0): counted on its posted outcomes alone it would hold
    only events, its excess log-loss would be enormous and a real drift would
    read as a large negative z. Expected sign from the definition: under odds
    ×3 the true risk q exceeds p, so E[D] = −Σ(q − p)·logit(p)/n > 0 wherever
    p < ½ (docs/methods.md §5.2), which Beta(2,8) risks nearly always are.
    """
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    reference = {"kind": "traffic", "start": "2026-03-02T00:00:00Z", "end": "2026-03-16T00:00:00Z"}
    setup_model(client, "imp", keep=(RULE,), implicit_negatives=True, reference=reference)
    rng = np.random.default_rng(11)
    for day in range(21):
        d = make_day(rng, day, 60)
        q = np.where(day >= 14, 3.0 * d.p / (1 - d.p + 3.0 * d.p), d.p)
        d.y = (rng.random(d.p.size) < q).astype(int)
        post_day(client, "imp", d, outcomes=False)
        events = [i for i in range(len(d.ids)) if d.y[i] == 1]
        post_outcomes(client, "imp", d, events)
    clock.set(T0 + timedelta(days=23))  # week 2 ends at day 21 and matures a day later
    refresh(client)
    alarms = client.get("/v1/models/imp/alarms", params={"rule": RULE}).json()["alarms"]
    everything = [a for a in alarms if a["segment"] is None]
    assert [a["evidence"]["period_start"][:10] for a in everything] == ["2026-03-16"]
    detail = everything[0]["evidence"]["detail"]
    assert detail["reference"] != "none: compared with calibration"
    assert detail["z"] > detail["z_critical"] > 0
    assert everything[0]["evidence"]["statistic"] > 0
    # The only enabled rule: it holds the model's whole budget of one false alarm a year.
    assert everything[0]["budget_share_per_year"] == pytest.approx(1.0)
