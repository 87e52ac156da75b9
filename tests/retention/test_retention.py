"""Retention removes old raw rows while the metrics for those periods still answer; rows that
arrive for a removed period are counted `expired`; the boundary never passes an hour still
waiting for its refresh.

Expected Brier scores and log-losses come from scikit-learn over the generated cases.
"""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import pytest
from sklearn.metrics import brier_score_loss, log_loss

from calibrant.clock import FixedClock
from calibrant.files.importing import import_file
from calibrant.files.reading import Layout
from calibrant.retention.job import RETENTION_ACTOR, apply_retention
from calibrant.store.engine import make_session_factory
from tests.conftest import Database, make_client
from tests.retention.scenario import (
    BOUNDARY,
    MODEL,
    NOW,
    figures,
    load,
    post,
    rfc,
    run_jobs,
    set_retention,
    weekly,
)


def test_retention_removes_old_raw_rows_while_the_metrics_for_those_periods_still_answer(
    db: Database,
) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        every = load(client)
        run_jobs(client)
        before = weekly(client)
        set_retention(client)
        report = run_jobs(client)["jobs"]["retention"]
        after = weekly(client)
        again = run_jobs(client)["jobs"]["retention"]
        model = client.get(f"/v1/models/{MODEL}").json()
        trail = client.get("/v1/audit", params={"action": "retention.pruned"}).json()

    old = [c for c in every if c["scored_at"] < BOUNDARY]
    assert len(old) == 26 * 6  # 2026-01-05 .. 2026-01-30
    assert report["predictions"] == report["outcomes"] == report["outcome_revisions"] == len(old)
    assert report["sealed"] == 1
    assert again["predictions"] == again["outcomes"] == again["sealed"] == 0  # a rerun removes nothing
    assert db.scalar("SELECT count(*) FROM predictions") == len(every) - len(old)
    assert db.scalar("SELECT count(*) FROM outcomes") == len(every) - len(old)
    assert db.scalar("SELECT count(*) FROM outcome_revisions") == len(every) - len(old)
    assert model["retention_days"] == 30
    assert model["pruned_before"] == "2026-01-31T00:00:00Z"
    # Every period answers exactly as before; only the flag saying raw rows are gone changes.
    assert [figures(p) for p in after] == [figures(p) for p in before]
    assert [p["raw_rows_removed"] for p in after] == [True] * 4 + [False] * 4
    assert all(p["computed_under_settings_of"] is None for p in after)
    # Against scikit-learn: the first week, whose raw rows are all gone.
    week = [c for c in every if c["scored_at"] < BOUNDARY - timedelta(days=19)]
    y, p = [c["y"] for c in week], [c["p"] for c in week]
    assert after[0]["n_predictions"] == len(week) == 42
    assert after[0]["brier"] == pytest.approx(brier_score_loss(y, p), rel=1e-9)
    assert after[0]["log_loss"] == pytest.approx(log_loss(y, p), rel=1e-9)
    # The run is in the audit trail, with what it removed.
    (event,) = trail["events"]
    assert (event["actor"], event["target"]) == (RETENTION_ACTOR, MODEL)
    assert event["detail"] == {"pruned_before": BOUNDARY.isoformat(), "predictions": len(old),
                               "outcomes": len(old), "outcome_revisions": len(old)}
    with db.engine.connect() as conn:
        runs = [r for (r,) in conn.exec_driver_sql("SELECT rows FROM job_runs WHERE job = 'retention'")]
    assert [r for r in runs if r] == [3 * len(old)]  # one run removed rows; the others found none


def test_rows_for_a_removed_period_are_counted_expired_not_refused(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        every = load(client)
        run_jobs(client)
        set_retention(client)
        run_jobs(client)
        gone = next(c for c in every if c["scored_at"] < BOUNDARY)
        kept = next(c for c in every if c["scored_at"] >= BOUNDARY)
        late_label = post(client, "outcomes", [
            {"id": gone["id"], "label": 1 - gone["y"],
             "observed_at": rfc(gone["scored_at"].replace(hour=21))},
            {"id": "never-seen", "label": 1, "observed_at": "2026-01-20T09:00:00Z"},
            {"id": kept["id"], "label": 1 - kept["y"], "observed_at": rfc(NOW)},
        ])
        late_prediction = post(client, "predictions", [
            {"id": "backfill-1", "probability": 0.3, "scored_at": "2026-01-12T09:00:00Z"},
            {"id": "fresh-1", "probability": 0.3, "scored_at": "2026-02-12T09:00:00Z"},
        ])
        case = client.get(f"/v1/models/{MODEL}/cases/backfill-1")
    assert late_label == {"accepted": 0, "duplicates": 0, "corrected": 1, "expired": 2}
    assert late_prediction == {"accepted": 1, "duplicates": 0, "expired": 1}
    assert case.status_code == 404
    assert db.scalar("SELECT count(*) FROM outcomes WHERE case_id IN ('never-seen', :c)", c=gone["id"]) == 0


def test_a_settings_change_recomputes_retained_periods_only(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        load(client)
        run_jobs(client)
        set_retention(client)
        run_jobs(client)
        before = weekly(client)
        assert client.put(f"/v1/models/{MODEL}", json={"segment_keys": ["region"]}).status_code == 200
        refreshed = run_jobs(client)["jobs"]["refresh"]
        after = weekly(client)
        north = weekly(client, tag="region:north")
    # 30 retained days of 6 hours each; the 26 sealed days are not touched.
    assert refreshed["buckets"] == 30 * 6
    assert [figures(p) for p in after] == [figures(p) for p in before]
    sealed_at = "2026-03-02T08:00:00Z"
    assert [p["computed_under_settings_of"] for p in after] == [sealed_at] * 4 + [None] * 4
    # The new segment exists only where raw rows were left to compute it from.
    assert [p["n_predictions"] for p in north] == [0, 0, 0, 6, 21, 21, 21, 21]


def test_the_boundary_waits_for_an_hour_still_to_be_refreshed(db: Database) -> None:
    clock = FixedClock(NOW)
    with make_client(db, clock=clock) as client:
        load(client)
        run_jobs(client)
        set_retention(client)
        post(client, "predictions",
             [{"id": "late-1", "probability": 0.4, "scored_at": "2026-01-20T07:30:00Z"}])
        first = apply_retention(db.engine, clock, db.settings(), worker="test")
        late_kept = db.scalar("SELECT count(*) FROM predictions WHERE case_id = 'late-1'")
        run_jobs(client)
        model = client.get(f"/v1/models/{MODEL}").json()
        period = weekly(client)[2]  # the week of 2026-01-19 holds the late prediction
    assert first.models[0].pruned_before.isoformat() == "2026-01-20T00:00:00+00:00"
    assert late_kept == 1
    assert model["pruned_before"] == "2026-01-31T00:00:00Z"
    assert period["n_predictions"] == 43  # summarised before its raw row went


def test_switching_retention_off_keeps_what_is_left(db: Database) -> None:
    clock = FixedClock(NOW)
    with make_client(db, clock=clock) as client:
        every = load(client)
        run_jobs(client)
        set_retention(client)
        run_jobs(client)
        set_retention(client, None)
        clock.advance(timedelta(days=10))
        later = run_jobs(client)["jobs"]["retention"]
        model = client.get(f"/v1/models/{MODEL}").json()
    kept = [c for c in every if c["scored_at"] >= BOUNDARY]
    assert later["predictions"] == later["sealed"] == 0
    assert db.scalar("SELECT count(*) FROM predictions") == len(kept)
    assert (model["retention_days"], model["pruned_before"]) == (None, "2026-01-31T00:00:00Z")


def test_a_retention_shorter_than_horizon_plus_lag_is_refused_naming_it(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        refused = client.put(f"/v1/models/{MODEL}", json={"outcome_horizon_days": 28, "outcome_lag_days": 5,
                                                          "retention_days": 30})
        exists = client.get(f"/v1/models/{MODEL}")
    assert refused.status_code == 422
    assert [e["field"] for e in refused.json()["errors"]] == ["retention_days"]
    assert "(33)" in refused.json()["errors"][0]["message"]
    assert exists.status_code == 404  # nothing was written


def test_an_import_counts_rows_for_a_removed_period_as_expired(db: Database, tmp_path: Path) -> None:
    clock = FixedClock(NOW)
    with make_client(db, clock=clock) as client:
        load(client)
        run_jobs(client)
        set_retention(client)
        run_jobs(client)
    source = tmp_path / "backfill.csv"
    source.write_text("id,probability,scored_at\n"
                      "old-1,0.2,2026-01-10T09:00:00Z\n"
                      "new-1,0.7,2026-02-10T09:00:00+01:00\n")
    counts = import_file(source, Layout("predictions"), model=MODEL, sessions=make_session_factory(db.engine),
                         settings=db.settings(), clock=clock, chunk_rows=10, progress=False)
    assert (counts.accepted, counts.expired, counts.rejected) == (1, 1, 0)
    assert db.scalar("SELECT count(*) FROM predictions WHERE case_id IN ('old-1', 'new-1')") == 1
