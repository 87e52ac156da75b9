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
import statsmodels.api as sm

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


SLOPE_RULE = "calibration-slope-weekly"


def test_one_extreme_prediction_cannot_fire_the_slope_rule(db: Database) -> None:
    """A calibrated week plus one p = 1e-9 case that had the event: the plain slope collapses, no alarm.

    Expected values from outside: the plain and robust slopes are statsmodels' logistic fits of
    y on logit(p), plain and clipped (docs/methods.md §9.2, §9.6); the counts of clipped and
    confident-error cases are numpy counts on the posted rows (p < ε = 2.2e-16 or p > 1 − ε;
    y = 1 with p < 1e-6).
    """
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    # A generous budget (50 a year: each rule tests at a level of about 0.16 here) makes the
    # claim stronger: even so the slope rule stays quiet, while the same week judged by the
    # plain slope alone (bounds and its Wald test, the rule this kind replaced) fires.
    setup_model(client, "x", keep=(SLOPE_RULE,), false_alarms_per_year=50)
    plain_rule = {"name": "plain-slope", "kind": "metric_threshold", "params": {
        "metric": "calibration_slope", "lower": 0.8, "upper": 1.2, "interval_excludes": 1.0, "min_n": 200}}
    assert client.post("/v1/models/x/rules", json=plain_rule).status_code == 201
    rng = np.random.default_rng(5)
    days = []
    for day in range(7):
        d = make_day(rng, day, 45)
        if day == 3:
            d.p[0], d.y[0] = 1e-9, 1  # the one extreme case
        post_day(client, "x", d)
        days.append(d)
    clock.set(T0 + timedelta(days=8, hours=2))
    refresh(client)
    assert client.get("/v1/models/x/alarms", params={"rule": SLOPE_RULE}).json()["alarms"] == []
    fired = client.get("/v1/models/x/alarms", params={"rule": "plain-slope"}).json()["alarms"]
    assert [a["segment"] for a in fired if a["segment"] is None] == [None]

    p = np.concatenate([d.p for d in days])
    y = np.concatenate([d.y for d in days])
    x = np.log(p / (1 - p))
    plain = sm.Logit(y, sm.add_constant(x)).fit(disp=0).params[1]  # source: statsmodels
    week = client.get("/v1/models/x/metrics", params={
        "granularity": "week", "start": "2026-03-02T00:00:00Z", "end": "2026-03-09T00:00:00Z"}).json()
    period = week["periods"][0]
    assert period["calibration_slope"] == pytest.approx(plain, abs=0.02)
    assert plain < 0.8  # the case really moves the plain slope below the rule's floor
    # The robust slope: the same fit on logits clipped to the week's 2.5 and 97.5 % points
    # (docs/methods.md §9.6), here with numpy's quantiles on the raw rows and statsmodels.
    lo, hi = np.quantile(x, [0.025, 0.975])
    robust = sm.Logit(y, sm.add_constant(np.clip(x, lo, hi))).fit(disp=0).params[1]
    assert period["calibration_slope_robust"] == pytest.approx(robust, abs=0.02)
    assert robust > 0.8  # the robust slope does not follow the plain one below the floor
    assert period["n_confident_errors"] == int(np.sum((y == 1) & (p < 1e-6)))  # numpy count
    assert period["n_clipped"] == int(np.sum((p < 2.220446049250313e-16) | (p > 1 - 2.220446049250313e-16)))
