"""The default calibration-slope threshold rule through the API, week by week.

Rule (``calibration-slope-weekly``): fire when the slope of a closed, mature
week lies outside [0.8, 1.2] *and* its 95 % interval excludes 1, with at least
200 labeled predictions. The truth of each week is built from the model's own
scores: logit q = β logit p, so β < 1 is an over-confident model (docs/methods.md §9).
Every verdict the test expects comes from statsmodels Logit(y, [1, logit p])
on the week's rows, chosen with pandas, with its Wald 95 % interval; a week
whose slope or interval lies within the summary's tolerance of a bound would
be ambiguous and is refused by the test itself.
"""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pandas as pd
import statsmodels.api as sm
from fastapi.testclient import TestClient
from scipy.special import expit, logit

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, Day, post_day, refresh, setup_model
from tests.conftest import Database, make_client
from tests.rollup.reference import GLM_TOLERANCE, MIN_EVENTS_SLOPE, SLOPE_TOLERANCE

RULE = "calibration-slope-weekly"
LOWER, UPPER, MIN_N = 0.8, 1.2, 200  # the default rule's parameters (rules.DEFAULT_RULES)
# week → (true slope β of logit q on logit p, cases per day, sd of logit p). Week 0 is a
# large week slightly over-confident: its interval excludes 1 but its slope is within the
# bounds. Week 2 is over-confident on a narrow, small sample: its slope is beyond the
# bounds, yet its interval still holds 1. Neither may fire.
PLAN = {0: (0.88, 800, 1.5), 1: (0.3, 20, 1.5), 2: (0.6, 30, 0.5), 3: (0.5, 100, 1.5), 4: (1.0, 100, 1.5)}


def _days(rng: np.random.Generator) -> tuple[list[Day], pd.DataFrame]:
    days, rows = [], []
    for week, (beta, per_day, spread) in PLAN.items():
        for day in range(7 * week, 7 * week + 7):
            p = expit(rng.normal(-1.0, spread, per_day))  # the wider the spread, the sharper the slope
            y = (rng.random(per_day) < expit(beta * logit(p))).astype(int)
            start = T0 + timedelta(days=day)
            scored = [start + timedelta(seconds=int(s)) for s in np.sort(rng.integers(0, 86400, per_day))]
            d = Day(day, [f"t{day}-{i}" for i in range(per_day)], p, y, ["north"] * per_day, scored)
            days.append(d)
            rows.append(pd.DataFrame({"scored_at": pd.to_datetime(scored, utc=True), "p": p, "y": y}))
    return days, pd.concat(rows, ignore_index=True)


def _expected(rows: pd.DataFrame, week: int) -> dict:
    """statsmodels' verdict on one week: slope, Wald 95 % interval, n, and whether the rule fires."""
    lo = pd.Timestamp(T0 + timedelta(days=7 * week))
    part = rows[(rows.scored_at >= lo) & (rows.scored_at < lo + pd.Timedelta(days=7))]
    y, x = part.y.to_numpy(), logit(part.p.to_numpy())
    fit = sm.Logit(y, sm.add_constant(x)).fit(disp=0)  # source: statsmodels Logit, slope = params[1]
    slope = float(fit.params[1])
    ci = tuple(float(v) for v in fit.conf_int(alpha=0.05)[1])  # source: statsmodels Wald interval
    tol = SLOPE_TOLERANCE * max(1.0, abs(slope)) + 1.96 * GLM_TOLERANCE * float(fit.bse[1])
    # The rule's condition, stated on statsmodels' numbers; refuse weeks too close to call.
    for value, bound in ((slope, LOWER), (slope, UPPER), (ci[0], 1.0), (ci[1], 1.0)):
        assert abs(value - bound) > 2 * tol, f"week {week}: {value} too close to {bound} to judge"
    beyond = slope < LOWER or slope > UPPER
    excludes_one = not ci[0] <= 1.0 <= ci[1]
    enough = len(part) >= MIN_N and min(y.sum(), len(y) - y.sum()) >= MIN_EVENTS_SLOPE
    return {"slope": slope, "ci": ci, "n": len(part), "tol": tol, "beyond": beyond,
            "excludes_one": excludes_one, "fire": (beyond and excludes_one) if enough else None}


def _slope_alarms(client: TestClient) -> list[dict]:
    r = client.get("/v1/models/t/alarms", params={"rule": RULE})
    assert r.status_code == 200, r.text
    return r.json()["alarms"]


def test_slope_rule_fires_on_over_confidence_respects_minimum_and_resolves(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "t", keep=(RULE,), segment_keys=[])
    days, rows = _days(np.random.default_rng(8))
    for d in days:
        post_day(client, "t", d)
    expected = {week: _expected(rows, week) for week in PLAN}
    # The constructed weeks say what they should: weeks 0 and 4 within bounds; the small
    # over-confident week would fire but is below the minimum sample; the narrow week is
    # beyond the bounds with 1 inside its interval; the full over-confident week fires.
    assert [expected[w]["fire"] for w in PLAN] == [False, None, False, True, False]
    flags = {w: (e["beyond"], e["excludes_one"], e["n"] >= MIN_N) for w, e in expected.items()}
    assert (flags[0], flags[1], flags[2]) == ((False, True, True), (True, True, False), (True, False, True))

    clock.set(T0 + timedelta(days=29, hours=2))  # week 3 ended on day 28 and matured a day later
    refresh(client)
    (alarm,) = _slope_alarms(client)
    assert alarm["state"] == "open"
    ev, want = alarm["evidence"], expected[3]
    assert ev["period_start"].startswith("2026-03-23")  # week 3: not the small week, nor the narrow one
    assert ev["n"] == want["n"]  # pandas row count of the week
    assert abs(ev["statistic"] - want["slope"]) <= want["tol"]  # statsmodels slope
    assert all(abs(a - b) <= want["tol"] for a, b in zip(ev["interval"], want["ci"], strict=True))
    rule = client.get(f"/v1/models/t/rules/{RULE}").json()
    assert datetime.fromisoformat(rule["evaluated_through"].replace("Z", "+00:00")) == T0 + timedelta(days=28)

    # Each closed week is judged once: another refresh at the same time changes nothing.
    events = db.scalar("SELECT count(*) FROM outbox_events")
    refresh(client)
    assert _slope_alarms(client) == [alarm]
    assert db.scalar("SELECT count(*) FROM outbox_events") == events

    clock.set(T0 + timedelta(days=36, hours=2))  # week 4, calibrated again, is mature
    refresh(client)
    (alarm,) = _slope_alarms(client)
    assert alarm["state"] == "resolved"
    assert alarm["resolved_by"] == "system"
    assert alarm["resolution"]["period_start"].startswith("2026-03-30")
    assert abs(alarm["resolution"]["statistic"] - expected[4]["slope"]) <= expected[4]["tol"]
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.opened'") == 1
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.resolved'") == 1
