"""Late outcomes, corrections, outcomes before predictions, and rows that arrive mid-refresh.

Four cases in the ISO week of Monday 2026-03-02, no horizon. Expected values
are worked by hand in the comments (Brier = mean (p − y)²).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from calibrant.clock import FixedClock
from calibrant.rollup import refresh as refresh_module
from calibrant.store import dirty
from calibrant.store.dirty import BucketKey
from calibrant.store.rollup_tables import DirtyBucket
from tests.conftest import Database, make_client
from tests.rollup.synthetic import refresh

MODEL = "late"
WEEK = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-09T00:00:00Z", "granularity": "week"}
HOUR = datetime(2026, 3, 3, 9, tzinfo=UTC)


def pred(case: str, p: float, at: str = "2026-03-03T09:20:00Z") -> dict:
    return {"id": case, "probability": p, "scored_at": at}


def label(case: str, y: int) -> dict:
    return {"id": case, "label": y, "observed_at": "2026-03-06T00:00:00Z"}


def post(client, kind: str, items: list[dict]) -> dict:
    r = client.post(f"/v1/models/{MODEL}/{kind}", json={kind: items})
    assert r.status_code == 200, r.text
    return r.json()


def week(client) -> dict:
    r = client.get(f"/v1/models/{MODEL}/metrics", params=WEEK)
    assert r.status_code == 200, r.text
    return r.json()["periods"][0]


def test_late_outcome_then_correction_change_an_old_week_after_each_refresh(db: Database) -> None:
    clock = FixedClock(datetime(2026, 3, 10, tzinfo=UTC))
    with make_client(db, clock=clock) as client:
        e3 = pred("e3", 0.7, "2026-03-05T14:00:00Z")
        post(client, "predictions", [pred("e1", 0.3), pred("e2", 0.6), e3])
        post(client, "outcomes", [label("e1", 0), label("e2", 1)])
        refresh(client)
        p = week(client)
        assert p["n_labeled"] == 2
        assert p["brier"] == pytest.approx((0.3**2 + 0.4**2) / 2)  # 0.125

        clock.advance(timedelta(days=40))  # weeks later, e3's outcome arrives
        post(client, "outcomes", [label("e3", 0)])
        p = week(client)
        assert p["n_labeled"] == 2  # not before the refresh: summaries are what was refreshed
        assert p["brier"] == pytest.approx(0.125)
        refresh(client)
        p = week(client)
        assert p["n_labeled"] == 3
        assert p["observed_rate"] == pytest.approx(1 / 3)
        assert p["brier"] == pytest.approx((0.09 + 0.16 + 0.49) / 3)  # e3: (0.7 − 0)²

        assert post(client, "outcomes", [label("e2", 0)])["corrected"] == 1
        refresh(client)
        p = week(client)
        assert p["n_labeled"] == 3
        assert p["observed_rate"] == 0.0
        assert p["brier"] == pytest.approx((0.09 + 0.36 + 0.49) / 3)  # e2 now (0.6 − 0)²


def test_outcome_that_arrives_before_its_prediction_counts_once_it_is_joined(db: Database) -> None:
    clock = FixedClock(datetime(2026, 3, 10, tzinfo=UTC))
    with make_client(db, clock=clock) as client:
        post(client, "outcomes", [label("early", 1)])
        refresh(client)
        assert week(client)["n_predictions"] == 0
        post(client, "predictions", [pred("early", 0.25)])
        refresh(client)
        p = week(client)
    assert (p["n_predictions"], p["n_labeled"]) == (1, 1)
    assert p["brier"] == pytest.approx(0.75**2)  # (0.25 − 1)²
    assert p["observed_rate"] == 1.0


def test_rows_ingested_between_read_and_write_of_a_refresh_are_not_lost(
    db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    clock = FixedClock(datetime(2026, 3, 10, tzinfo=UTC))
    with make_client(db, clock=clock) as client:
        post(client, "predictions", [pred("r1", 0.2)])
        real_write = refresh_module._write_buckets
        injected: list[int] = []

        def write_after_an_ingest(engine, clock_, work):
            if not injected:  # once: the bucket's rows were read, now a new row lands in it
                late_row = pred("r2", 0.9, "2026-03-03T09:50:00Z")
                injected.append(post(client, "predictions", [late_row])["accepted"])
            return real_write(engine, clock_, work)

        monkeypatch.setattr(refresh_module, "_write_buckets", write_after_an_ingest)
        report = refresh_module.refresh_dirty(db.engine, clock, worker="only")
        p = week(client)
    key = BucketKey(1, "default", HOUR)
    assert injected == [1]
    # first pass answered for generation 1 and left the mark (generation 2 came meanwhile);
    # the loop's next pass recomputed generation 2, which includes r2
    assert report.recomputed == [(key, 1), (key, 2)]
    assert report.requeued == 1
    assert report.rows_read == 1 + 2
    assert int(db.scalar("SELECT COUNT(*) FROM dirty_buckets")) == 0
    assert p["n_predictions"] == 2
    assert p["mean_probability"] == pytest.approx((0.2 + 0.9) / 2)


def test_finish_keeps_a_mark_whose_generation_moved(db: Database) -> None:
    """The store protocol itself: claim, read, ingest into the same bucket, finish."""
    clock = FixedClock(datetime(2026, 3, 10, tzinfo=UTC))
    with make_client(db, clock=clock) as client:
        post(client, "predictions", [pred("s1", 0.4)])
        key = BucketKey(1, "default", HOUR)
        with db.engine.begin() as conn:
            claim = dirty.claim(conn, key, "w1", clock.now(), timedelta(minutes=10))
        assert claim is not None
        assert claim.generation == 1
        (computed,) = refresh_module._read_buckets(db.engine, [key], 1000)
        assert computed.n_rows == 1
        post(client, "predictions", [pred("s2", 0.8, "2026-03-03T09:05:00Z")])
        assert refresh_module._write_buckets(db.engine, clock, [(claim, computed)]) == [False]
        with db.engine.connect() as conn:
            row = conn.execute(DirtyBucket.__table__.select()).mappings().one()
        assert (row["generation"], row["claimed_by"], row["claimed_until"]) == (2, None, None)
        assert week(client)["n_predictions"] == 1  # the stale pass stored what it read
        report = refresh_module.refresh_dirty(db.engine, clock, worker="w2")
        assert report.recomputed == [(key, 2)]
        assert week(client)["n_predictions"] == 2
