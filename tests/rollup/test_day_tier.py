"""The daily tier: day summaries are read for whole, current days; dirty days fall back to hours.

Expected values come from the raw rows chosen by plain pandas (``Traffic.between``)
and from scikit-learn via ``tests.rollup.reference``; nothing is computed by
service code and then compared with itself.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
from sklearn.metrics import log_loss

from calibrant.clock import FixedClock
from calibrant.store import migrate
from tests.conftest import Database, make_client
from tests.rollup.reference import assert_period_matches
from tests.rollup.synthetic import MONDAY, make_traffic, metrics, post_all, refresh

NOW = datetime(2026, 5, 1, tzinfo=UTC)
MODEL = "tiers"
WEEKS = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-30T00:00:00Z", "granularity": "week"}


def _day_rows(db: Database) -> set[str]:
    """Distinct days that have a day summary, as ISO dates (dialect-neutral)."""
    with db.engine.connect() as conn:
        rows = conn.exec_driver_sql("SELECT DISTINCT day FROM day_summaries").scalars().all()
    return {str(d)[:10] for d in rows}


def test_refresh_builds_one_day_summary_per_day_and_the_answer_is_unchanged(db: Database) -> None:
    traffic = make_traffic(n_cases=1200, days=28)
    with make_client(db, clock=FixedClock(NOW)) as client:
        post_all(client, MODEL, traffic.frame)
        report = refresh(client)
        body = metrics(client, MODEL, **WEEKS)
    days_with_rows = set(traffic.frame.scored_at.dt.strftime("%Y-%m-%d"))
    assert _day_rows(db) == days_with_rows
    assert report["jobs"]["refresh"]["days"] >= len(days_with_rows)
    assert db.scalar("SELECT COUNT(*) FROM dirty_days") == 0
    assert len(body["periods"]) == 4  # the four weeks of WEEKS
    for i, period in enumerate(body["periods"]):
        start = MONDAY + timedelta(weeks=i)
        # scikit-learn / statsmodels on the week's rows (tests.rollup.reference)
        assert_period_matches(period, traffic.between(start, start + timedelta(weeks=1)))


def test_query_reads_the_day_tier_and_falls_back_to_hours_for_a_dirty_day(db: Database) -> None:
    traffic = make_traffic(n_cases=1200, days=7)
    day = MONDAY + timedelta(days=3)
    in_day = len(traffic.between(day, day + timedelta(days=1)))
    week = {"start": MONDAY.isoformat(), "end": (MONDAY + timedelta(weeks=1)).isoformat(),
            "granularity": "week"}
    with make_client(db, clock=FixedClock(NOW)) as client:
        post_all(client, MODEL, traffic.frame)
        refresh(client)
        assert metrics(client, MODEL, **week)["periods"][0]["n_predictions"] == len(traffic.frame)
        # Remove one day's day summaries without marking it: the answer loses exactly that
        # day, which shows the week is read from the daily tier, not from hours.
        with db.engine.begin() as conn:
            conn.exec_driver_sql("DELETE FROM day_summaries WHERE day >= ? AND day < ?"
                                 if db.dialect == "sqlite" else
                                 "DELETE FROM day_summaries WHERE day >= %s AND day < %s",
                                 (_bind(db, day), _bind(db, day + timedelta(days=1))))
        assert metrics(client, MODEL, **week)["periods"][0]["n_predictions"] == len(traffic.frame) - in_day
        # A dirty mark on the day sends the query to its hours: whole again, before any refresh.
        # (A mark of one version is enough for the query; the refresh merges each marked version.)
        versions = sorted(traffic.frame.version.unique())
        with db.engine.begin() as conn:
            for version in versions:
                conn.exec_driver_sql(
                    "INSERT INTO dirty_days (model_id, version, day, generation, marked_at) "
                    + ("VALUES (1, ?, ?, 1, ?)" if db.dialect == "sqlite" else "VALUES (1, %s, %s, 1, %s)"),
                    (version, _bind(db, day), _bind(db, NOW)))
        period = metrics(client, MODEL, **week)["periods"][0]
        assert_period_matches(period, traffic.between(MONDAY, MONDAY + timedelta(weeks=1)))
        # The refresh merges the day of every version again and clears the marks.
        assert refresh(client)["jobs"]["refresh"]["days"] == len(versions)
        assert db.scalar("SELECT COUNT(*) FROM dirty_days") == 0
        assert metrics(client, MODEL, **week)["periods"][0]["n_predictions"] == len(traffic.frame)


def _bind(db: Database, instant: datetime) -> object:
    # SQLite stores UTC instants as naive text (store.types.UTCDateTime); PostgreSQL takes them as they are.
    return instant.strftime("%Y-%m-%d %H:%M:%S.%f") if db.dialect == "sqlite" else instant


def test_a_late_outcome_reaches_the_day_tier_after_the_next_refresh(db: Database) -> None:
    traffic = make_traffic(n_cases=600, days=7)
    frame = traffic.frame
    late = frame.dropna(subset=["label"]).drop_duplicates("id").iloc[0]
    with make_client(db, clock=FixedClock(NOW)) as client:
        post_all(client, MODEL, frame[frame.id != late.id], outcomes=True)
        post_all(client, MODEL, frame[frame.id == late.id], outcomes=False)
        refresh(client)
        week = {"start": MONDAY.isoformat(), "end": (MONDAY + timedelta(weeks=1)).isoformat(),
                "granularity": "week"}
        before = metrics(client, MODEL, **week)["periods"][0]
        r = client.post(f"/v1/models/{MODEL}/outcomes", json={"outcomes": [
            {"id": late.id, "label": int(late.label), "observed_at": NOW.isoformat()}]})
        assert r.status_code == 200, r.text
        refresh(client)
        after = metrics(client, MODEL, **week)["periods"][0]
    labeled = frame.dropna(subset=["label"])
    held_back = labeled[labeled.id != late.id]
    assert before["n_labeled"] == len(held_back)
    assert after["n_labeled"] == len(labeled)
    # scikit-learn's log_loss on every labeled row of the week, the late one included
    expected = log_loss(labeled.label.to_numpy(), labeled.probability.to_numpy(), labels=[0, 1])
    assert np.isclose(after["log_loss"], expected, rtol=1e-12)


def test_maturity_boundary_inside_a_day_splits_that_day_by_hour(db: Database) -> None:
    # Horizon 2 days, no lag: an hourly bucket is mature when its end + 2 d <= now (docs/architecture.md).
    # With now at 12:00 on day 6, day 4's buckets ending by 12:00 are mature (traffic sits at
    # 00, 11 and 23 h), its 23 h bucket is not: the boundary cuts day 4.
    traffic = make_traffic(n_cases=1500, days=7)
    now = MONDAY + timedelta(days=6, hours=12)
    boundary_end = now - timedelta(days=2)  # buckets ending at or before this are mature
    with make_client(db, clock=FixedClock(now)) as client:
        r = client.put(f"/v1/models/{MODEL}", json={"outcome_horizon_days": 2})
        assert r.status_code in (200, 201), r.text
        post_all(client, MODEL, traffic.frame)
        refresh(client)
        body = metrics(client, MODEL, start=MONDAY.isoformat(),
                       end=(MONDAY + timedelta(days=7)).isoformat(), granularity="day")
    f = traffic.frame
    bucket_end = f.scored_at.dt.floor("h") + pd.Timedelta(hours=1)
    assert len(body["periods"]) == 7  # one per day of the seven asked for
    for i, period in enumerate(body["periods"]):
        lo = pd.Timestamp(MONDAY + timedelta(days=i))
        rows = f[(f.scored_at >= lo) & (f.scored_at < lo + pd.Timedelta(days=1))]
        young = (bucket_end[rows.index] > pd.Timestamp(boundary_end)).sum()
        assert period["n_predictions"] == len(rows), i
        assert period["n_immature"] == young, i
        mature = rows[bucket_end[rows.index] <= pd.Timestamp(boundary_end)].dropna(subset=["label"])
        if len(mature) and mature.label.nunique() == 2:
            # scikit-learn on the day's mature labeled rows
            expected = log_loss(mature.label.to_numpy(), mature.probability.to_numpy(), labels=[0, 1])
            assert np.isclose(period["log_loss"], expected, rtol=1e-12), i
    # The cut really falls inside day 4: some of its rows are mature and some are not.
    day4 = body["periods"][4]
    assert 0 < day4["n_immature"] < day4["n_predictions"]


def test_upgrading_an_existing_database_marks_its_days_for_the_first_merge(db: Database) -> None:
    traffic = make_traffic(n_cases=400, days=5)
    week = {"start": MONDAY.isoformat(), "end": (MONDAY + timedelta(weeks=1)).isoformat(),
            "granularity": "week"}
    with make_client(db, clock=FixedClock(NOW)) as client:
        post_all(client, MODEL, traffic.frame)
        refresh(client)
        # Back to the schema before the daily tier (hourly summaries stay), then up again.
        migrate.downgrade(db.engine, "0004")
        migrate.upgrade(db.engine)
        versions_days = traffic.frame.assign(day=traffic.frame.scored_at.dt.strftime("%Y-%m-%d"))
        expected_marks = len(versions_days.drop_duplicates(["version", "day"]))
        assert db.scalar("SELECT COUNT(*) FROM dirty_days") == expected_marks
        assert db.scalar("SELECT COUNT(*) FROM day_summaries") == 0
        # Before the merge the query reads hours; after it, days; both match the rows.
        rows = traffic.between(MONDAY, MONDAY + timedelta(weeks=1))
        assert_period_matches(metrics(client, MODEL, **week)["periods"][0], rows)
        assert refresh(client)["jobs"]["refresh"]["days"] == expected_marks
        assert_period_matches(metrics(client, MODEL, **week)["periods"][0], rows)
