"""Migration 0006 gives existing outcomes the observation time of their first label."""

from __future__ import annotations

from datetime import UTC, datetime

from calibrant.clock import FixedClock
from calibrant.store import migrate
from tests.conftest import Database, make_client

NOW = datetime(2026, 3, 10, tzinfo=UTC)


def test_upgrade_backfills_first_observed_at_from_the_label_history(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        r = client.post("/v1/models/m/predictions", json={"predictions": [
            {"id": "a", "probability": 0.3, "scored_at": "2026-03-01T10:00:00Z"},
            {"id": "b", "probability": 0.6, "scored_at": "2026-03-01T11:00:00Z"}]})
        assert r.status_code == 200, r.text
        first = client.post("/v1/models/m/outcomes", json={"outcomes": [
            {"id": "a", "label": 1, "observed_at": "2026-03-02T00:00:00Z"},
            {"id": "b", "label": 0, "observed_at": "2026-03-03T00:00:00Z"}]})
        assert first.status_code == 200, first.text
        fix = client.post("/v1/models/m/outcomes", json={"outcomes": [
            {"id": "a", "label": 0, "observed_at": "2026-03-05T00:00:00Z"}]})
        assert fix.json()["corrected"] == 1
    before = _first_observed(db)
    # what ingest wrote: a keeps its first label's time through the correction
    assert before == {"a": "2026-03-02", "b": "2026-03-03"}
    migrate.downgrade(db.engine, "0005")
    migrate.upgrade(db.engine)
    assert _first_observed(db) == before  # rebuilt from outcome_revisions, not from observed_at
    assert db.scalar("SELECT COUNT(*) FROM outcomes WHERE first_observed_at IS NULL") == 0


def _first_observed(db: Database) -> dict[str, str]:
    with db.engine.connect() as conn:
        rows = conn.exec_driver_sql("SELECT case_id, first_observed_at FROM outcomes").all()
    return {c: str(t)[:10] for c, t in rows}
