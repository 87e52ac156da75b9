"""Stored snapshots: one per distinct body, readable by (model, start, end, as_of), and the
previous period's snapshot is what "changes since the previous report" compares with."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from sqlalchemy.orm import Session

from calibrant.clock import FixedClock
from calibrant.reports import snapshots
from tests.conftest import Database, make_client
from tests.reports.scenario import CASES, FIRST_LABELS, MODEL, PLAN, SPAN, outcome, post, prediction

T0 = datetime(2026, 3, 2, 8, tzinfo=UTC)
NEXT = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-09T00:00:00Z"}


def test_a_report_is_stored_once_per_body_and_read_back_by_its_key(db: Database) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        post(client, "predictions", [prediction(*c) for c in CASES])
        post(client, "outcomes", [outcome(c, y) for c, y in FIRST_LABELS.items()])
        params = {**SPAN, "as_of": "2026-03-02T08:00:00Z"}
        first = client.get(f"/v1/models/{MODEL}/report", params=params).json()
        clock.advance(timedelta(hours=3))
        again = client.get(f"/v1/models/{MODEL}/report", params=params).json()
    assert again["snapshot_id"] == first["snapshot_id"]
    assert db.scalar("SELECT count(*) FROM report_snapshots") == 1
    with Session(db.engine) as session:
        stored = snapshots.stored(session, MODEL, datetime(2026, 2, 23, tzinfo=UTC),
                                  datetime(2026, 3, 2, tzinfo=UTC), datetime(2026, 3, 2, 8, tzinfo=UTC))
        missing = snapshots.stored(session, MODEL, datetime(2026, 2, 23, tzinfo=UTC),
                                   datetime(2026, 3, 2, tzinfo=UTC), datetime(2026, 3, 2, 9, tzinfo=UTC))
    assert stored is not None
    assert missing is None
    assert stored["content_hash"] == first["content_hash"]
    assert stored["overall"] == first["overall"]
    assert stored["periods"] == first["periods"]


def test_the_next_report_compares_with_the_previous_period_known_by_its_as_of(db: Database) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        post(client, "predictions", [prediction(*c) for c in CASES])
        post(client, "outcomes", [outcome(c, y) for c, y in FIRST_LABELS.items()])
        assert client.put(f"/v1/models/{MODEL}/plan", json=PLAN).status_code == 200
        earlier = client.get(f"/v1/models/{MODEL}/report", params=SPAN).json()
        clock.advance(timedelta(days=8))
        new_owner = {**PLAN, "owner": "Hub operations"}
        assert client.put(f"/v1/models/{MODEL}/plan", json=new_owner).status_code == 200
        assert client.put(f"/v1/models/{MODEL}", json={"description": "week two"}).status_code == 200
        later = client.get(f"/v1/models/{MODEL}/report", params=NEXT).json()
        # As of an instant before the earlier report was generated, it had no predecessor.
        before = client.get(f"/v1/models/{MODEL}/report", params={**NEXT, "as_of": "2026-03-02T07:00:00Z"})
    changes = later["changes_since_previous"]
    assert changes["previous"]["content_hash"] == earlier["content_hash"]
    assert changes["plan_version_before"] == 1
    assert changes["plan_version_now"] == 2
    assert [v["subject"] for v in changes["settings_changes"]] == ["settings"]
    log_loss_row = next(f for f in changes["figures"] if f["metric"] == "log_loss")
    assert log_loss_row["previous"] == earlier["overall"]["log_loss"]
    assert before.json()["changes_since_previous"]["previous"] is None
