"""The default feed-starvation rule on stored feeds, through the jobs (POST /v1/refresh; the simulated
year runs its summaries and alarm jobs directly, without a webhook round per week).

Rule ``feed-starvation`` (StarvationParams defaults) with every other rule
disabled, so it holds the model's whole default budget (1 false alarm a year)
and its outcome test runs at 1 / (24 × 365.25) per evaluated hour.

Its two checks: ``prediction_silence`` (no prediction for more than 24 h, a
condition) and ``outcome_arrival`` (the labeled share of the last 7 days' mature
predictions below the 28 days' before: one-sided Fisher exact test, whose
p-value is checked against ``scipy.stats.fisher_exact``, plus the effect floor
½ × the history's share). Expected counts come from the test's own rows with
pandas: a prediction is mature when its scored hour ends at least H before now
(docs/architecture.md); the recent window is the 7 days ending where the first
immature hour begins, the history the 28 days before. The silence is counted
from the latest ``scored_at`` the test posted. Time is a FixedClock.
"""

from __future__ import annotations

from datetime import datetime, timedelta

import numpy as np
import pandas as pd
import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from scipy.stats import fisher_exact

from calibrant.alarms import feeds
from calibrant.alarms import jobs as alarm_jobs
from calibrant.clock import FixedClock
from calibrant.rollup.refresh import refresh_dirty
from calibrant.store.engine import make_session_factory
from calibrant.store.tables import Model
from tests.alarms.streams import T0, Day, make_day, post_day, post_outcomes, refresh, setup_model
from tests.conftest import Database, make_client

RULE = "feed-starvation"
SILENCE, ARRIVAL = "prediction_silence", "outcome_arrival"
MAX_SILENCE_H, WINDOW, HISTORY = 24.0, timedelta(days=7), timedelta(days=28)  # the rule's defaults
HOURLY_LEVEL = 1.0 / (24 * 365.25)  # the whole default budget of 1 a year, one test per hour
HORIZON = timedelta(days=1)  # setup_model's outcome horizon
SHIFT_HOURS = (1, 9, 17)


def _alarms(client: TestClient) -> list[dict]:
    r = client.get("/v1/models/s/alarms", params={"rule": RULE})
    assert r.status_code == 200, r.text
    return r.json()["alarms"]


def _recent(rng: np.random.Generator, day: int, at: list[datetime]) -> Day:
    """Predictions scored at the given instants (no outcomes are posted for them)."""
    return Day(day, [f"r{day}-{i}" for i in range(len(at))], rng.beta(2, 8, len(at)),
               np.zeros(len(at), dtype=int), ["north"] * len(at), at)


def _model(db: Database, **settings: object) -> tuple[TestClient, FixedClock]:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "s", keep=(RULE,), **settings)
    return client, clock


def _summaries_then_alarms(db: Database, clock: FixedClock) -> None:
    """The two jobs POST /v1/refresh runs first, without the webhook delivery a year of rounds need not."""
    refresh_dirty(db.engine, clock, worker="test")
    alarm_jobs.run(db.engine, clock)


def _shifts(rng: np.random.Generator, day: int, per_shift: int) -> Day:
    """A day of calibrated predictions (y ~ Bernoulli(p)) scored in three hours, eight apart.

    Few hourly buckets, and no segments, keep months of traffic quick to roll up; the
    longest gap between predictions stays under 16 h, well inside the 24 h silence limit.
    """
    n = per_shift * len(SHIFT_HOURS)
    p = rng.beta(2, 8, n)
    y = (rng.random(n) < p).astype(int)
    start = T0 + timedelta(days=day)
    scored = sorted(start + timedelta(hours=h, seconds=int(s))
                    for h in SHIFT_HOURS for s in rng.integers(0, 3600, per_shift))
    return Day(day, [f"c{day}-{i}" for i in range(n)], p, y, ["north"] * n, scored)


def _week(rng: np.random.Generator, week: int, per_shift: int) -> Day:
    """Seven days of ``_shifts``, posted together."""
    days = [_shifts(rng, day, per_shift) for day in range(7 * week, 7 * week + 7)]
    return Day(week, [i for d in days for i in d.ids], np.concatenate([d.p for d in days]),
               np.concatenate([d.y for d in days]), [r for d in days for r in d.region],
               [t for d in days for t in d.scored_at])


def _frame(d: Day, labeled: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame({"scored_at": pd.to_datetime(d.scored_at, utc=True), "labeled": labeled})


def _windows(rows: pd.DataFrame, now: datetime) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The recent and history mature windows at ``now``, counted from the test's own rows."""
    # Mature: the scored hour ends at least H before now; the first immature hour starts after the last.
    first_immature = pd.Timestamp(now - HORIZON - timedelta(hours=1)).floor("h") + pd.Timedelta(hours=1)
    split = first_immature - pd.Timedelta(WINDOW)
    recent = rows[(rows.scored_at >= split) & (rows.scored_at < first_immature)]
    history = rows[(rows.scored_at >= split - pd.Timedelta(HISTORY)) & (rows.scored_at < split)]
    return recent, history


@pytest.mark.slow
def test_a_calibrated_year_with_implicit_negatives_raises_no_starvation_alarm(db: Database) -> None:
    client, clock = _model(db, implicit_negatives=True, segment_keys=[])
    rng = np.random.default_rng(14)
    frames = []
    judged = old_rule_crossed = 0
    for week in range(52):
        clock.set(T0 + timedelta(weeks=week + 1))  # the week's predictions arrive as it ends
        d = _week(rng, week, 8)
        post_day(client, "s", d, outcomes=False)
        post_outcomes(client, "s", d, np.flatnonzero(d.y == 1))  # only events are ever reported
        frames.append(_frame(d, d.y == 1))
        _summaries_then_alarms(db, clock)
        recent, _ = _windows(pd.concat(frames, ignore_index=True), clock.now())
        if len(recent) >= 50:  # the old rule: over half of 7 days' mature predictions without outcome
            judged += 1
            old_rule_crossed += int((~recent.labeled).mean() > 0.5)
    assert judged == old_rule_crossed == 52  # the old rule would have been open all year
    assert _alarms(client) == []

    # The rule was judging all along: silence now opens it, and it says why outcomes were not judged.
    clock.advance(timedelta(days=2))
    refresh(client)
    (alarm,) = _alarms(client)
    checks = alarm["evidence"]["detail"]["checks"]
    assert checks[SILENCE]["crossed"] is True
    assert checks[ARRIVAL]["crossed"] is None
    assert "not checked: implicit negatives" in alarm["summary"]


def test_outcomes_that_stop_arriving_raise_outcome_arrival_until_they_arrive(db: Database) -> None:
    client, clock = _model(db, segment_keys=[])  # outcomes are explicit: a missing one is missing
    rng = np.random.default_rng(15)
    stop_day, days = 30, 42
    frames, missing = [], []
    for day in range(days):
        d = _shifts(rng, day, 14)
        labeled = rng.random(42) < 0.6 if day < stop_day else np.zeros(42, dtype=bool)
        clock.set(T0 + timedelta(days=day + 1))  # the day's predictions arrive as it ends
        post_day(client, "s", d, outcomes=False)
        post_outcomes(client, "s", d, np.flatnonzero(labeled))
        if day >= stop_day:
            missing.append((d, np.flatnonzero(rng.random(42) < 0.6)))
        frames.append(_frame(d, labeled))
        refresh(client)
    rows = pd.concat(frames, ignore_index=True)

    (alarm,) = _alarms(client)
    assert alarm["state"] == "open"
    checked_at = datetime.fromisoformat(alarm["evidence"]["checked_at"].replace("Z", "+00:00"))
    # Opened only once unlabeled predictions had matured into the recent window.
    assert checked_at > T0 + timedelta(days=stop_day) + HORIZON
    detail = alarm["evidence"]["detail"]
    arrival = detail["checks"][ARRIVAL]
    assert arrival["crossed"] is True
    assert detail["checks"][SILENCE]["crossed"] is False
    recent, history = _windows(rows, checked_at)
    assert arrival["n_mature_recent"] == len(recent)
    assert arrival["n_labeled_recent"] == int(recent.labeled.sum())
    assert arrival["n_mature_history"] == len(history)
    assert arrival["n_labeled_history"] == int(history.labeled.sum())
    table = [[int(recent.labeled.sum()), int((~recent.labeled).sum())],
             [int(history.labeled.sum()), int((~history.labeled).sum())]]
    p = fisher_exact(table, alternative="less").pvalue  # scipy.stats.fisher_exact, one-sided
    assert arrival["p_value"] == pytest.approx(p, rel=1e-9, abs=1e-300)
    assert p <= HOURLY_LEVEL
    assert arrival["level"] == pytest.approx(HOURLY_LEVEL, rel=1e-12)
    assert alarm["evidence"]["statistic"] == arrival["p_value"]
    assert recent.labeled.mean() < 0.5 * history.labeled.mean()

    # Between whole hours the windows are still whole hours: the counts read at 37 minutes past.
    between = T0 + timedelta(days=days, minutes=37)
    with make_session_factory(db.engine)() as session:
        model = session.scalars(sa.select(Model).where(Model.name == "s")).one()
        counts = feeds.feed_counts(session, model, 7, 28, between)
    recent, history = _windows(rows, between)
    assert (counts.recent.mature, counts.recent.labeled) == (len(recent), int(recent.labeled.sum()))
    assert (counts.history.mature, counts.history.labeled) == (len(history), int(history.labeled.sum()))

    for d, which in missing:  # the late outcomes finally come in
        post_outcomes(client, "s", d, which)
    clock.advance(timedelta(minutes=10))
    refresh(client)
    (alarm,) = _alarms(client)
    assert alarm["state"] == "resolved"
    assert alarm["resolution"]["reason"] == "feeds healthy again"


def test_silence_longer_than_allowed_raises_prediction_silence_and_new_predictions_resolve(
        db: Database) -> None:
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
    checks = alarm["evidence"]["detail"]["checks"]
    silence = (clock.now() - last).total_seconds() / 3600  # from the test's own timestamps
    assert silence > MAX_SILENCE_H
    assert checks[SILENCE]["silence_hours"] == pytest.approx(silence, rel=1e-12)
    assert checks[SILENCE]["crossed"] is True
    assert "outside the false-alarm budget" in checks[SILENCE]["basis"]
    assert checks[ARRIVAL]["crossed"] is False  # every outcome arrived
    assert alarm["evidence"]["statistic"] == pytest.approx(silence, rel=1e-12)
    assert alarm["summary"].startswith(f"{RULE}: {SILENCE}: last prediction")

    post_day(client, "s", _recent(rng, 15, [clock.now() - timedelta(minutes=30)]), outcomes=False)
    refresh(client)
    (alarm,) = _alarms(client)
    assert alarm["state"] == "resolved"
    assert alarm["resolved_by"] == "system"
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.opened'") == 1
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.resolved'") == 1


def test_without_an_outcome_horizon_only_silence_is_checked(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    assert client.put("/v1/models/s", json={"segment_keys": ["region"]}).status_code in (200, 201)
    for rule in client.get("/v1/models/s/rules").json()["rules"]:
        client.put(f"/v1/models/s/rules/{rule['name']}", json={"enabled": rule["name"] == RULE})
    rng = np.random.default_rng(5)
    for day in range(3):
        post_day(client, "s", make_day(rng, day, 40), outcomes=False)
    clock.set(T0 + timedelta(days=5))
    refresh(client)
    (alarm,) = _alarms(client)
    checks = alarm["evidence"]["detail"]["checks"]
    assert checks[SILENCE]["crossed"] is True
    assert checks[ARRIVAL]["crossed"] is None
    assert "no outcome horizon" in checks[ARRIVAL]["message"]


def test_rule_parameters_are_checked_field_by_field(db: Database) -> None:
    client, _ = _model(db)
    for params, field in (({"min_rate_ratio": 2}, "params.min_rate_ratio"),
                          ({"max_unlabeled_share": 0.5}, "params.max_unlabeled_share"),
                          ({"budget_weight": 0}, "params.budget_weight")):
        body = {"name": "starved", "kind": "starvation", "params": params}
        r = client.post("/v1/models/s/rules", json=body)
        assert r.status_code == 422, r.text
        assert r.json()["errors"][0]["field"] == field
    r = client.put(f"/v1/models/s/rules/{RULE}", json={"params": {"history_days": 56}})
    assert r.status_code == 200, r.text
    assert r.json()["params"]["history_days"] == 56
    assert r.json()["params"]["window_days"] == 7  # merged, not replaced
