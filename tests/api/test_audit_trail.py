"""Every change to models, settings and keys leaves an audit_events row: who, when, what."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import sqlalchemy as sa

from calibrant.clock import FixedClock
from tests.api.issued_keys import bearer, create_key, run_cli
from tests.api.payloads import count_rows, post_outcomes, post_predictions, prediction
from tests.conftest import Database, make_client

START = datetime(2026, 3, 1, 8, 0, tzinfo=UTC)


def _events(db: Database) -> list[dict]:
    with db.engine.connect() as conn:
        rows = conn.execute(
            sa.text("SELECT at, actor, action, target, detail, model_id FROM audit_events ORDER BY id")
        ).mappings()
        events = [dict(r) for r in rows]
    for event in events:
        if isinstance(event["detail"], str):  # SQLite hands JSON back as text
            event["detail"] = json.loads(event["detail"])
        at = event["at"]
        if isinstance(at, str):
            at = datetime.fromisoformat(at)
        event["at"] = at if at.tzinfo else at.replace(tzinfo=UTC)
    return events


def _model_id(db: Database, name: str) -> int:
    return int(db.scalar("SELECT id FROM models WHERE name = :name", name=name))


def test_first_ingest_records_model_creation_once(db: Database) -> None:
    clock = FixedClock(START)
    with make_client(db, clock=clock) as client:
        post_predictions(client, "churn", [prediction("a")])
        clock.advance(timedelta(minutes=5))
        post_predictions(client, "churn", [prediction("b")])
        post_outcomes(client, "fraud", [{"id": "a", "label": 1, "observed_at": "2026-03-01T00:00:00Z"}])
    events = _events(db)
    assert [(e["action"], e["target"], e["actor"]) for e in events] == [
        ("model.created", "churn", "local"),
        ("model.created", "fraud", "local"),
    ]
    assert events[0]["at"] == START
    assert events[0]["model_id"] == _model_id(db, "churn")


def test_put_records_creation_and_each_real_change(db: Database) -> None:
    clock = FixedClock(START)
    with make_client(db, clock=clock) as client:
        client.put("/v1/models/churn", json={"description": "v1"})
        clock.advance(timedelta(hours=1))
        client.put("/v1/models/churn", json={"outcome_horizon_days": 14, "description": "v1"})
        clock.advance(timedelta(hours=1))
        unchanged = client.put("/v1/models/churn", json={"outcome_horizon_days": 14})
        refused = client.put("/v1/models/churn", json={"outcome_horizon_days": -3})
    assert unchanged.status_code == 200
    assert refused.status_code == 422
    events = _events(db)
    assert [e["action"] for e in events] == ["model.created", "model.settings_changed"]
    change = events[1]
    assert change["at"] == START + timedelta(hours=1)
    assert change["target"] == "churn"
    assert change["model_id"] == _model_id(db, "churn")
    assert change["detail"]["changes"] == {"outcome_horizon_days": {"from": None, "to": 14}}


def test_changes_made_with_a_key_name_that_key(db: Database, monkeypatch, capsys) -> None:
    token = create_key(db, monkeypatch, capsys, "admin")
    key_id = db.scalar("SELECT key_id FROM api_keys")
    with make_client(db, auth="required") as client:
        assert client.put("/v1/models/churn", json={}, headers=bearer(token)).status_code == 201
        client.put("/v1/models/churn", json={"segment_keys": ["region"]}, headers=bearer(token))
    model_events = [e for e in _events(db) if e["action"].startswith("model.")]
    assert [e["actor"] for e in model_events] == [f"key:{key_id}", f"key:{key_id}"]


def test_key_creation_and_revocation_are_recorded(db: Database, monkeypatch, capsys) -> None:
    before = datetime.now(UTC)
    create_key(db, monkeypatch, capsys, "ingest", model="churn")
    key_id = str(db.scalar("SELECT key_id FROM api_keys"))
    assert run_cli(db, monkeypatch, capsys, "keys", "revoke", key_id)[0] == 0
    after = datetime.now(UTC)
    events = _events(db)
    assert [(e["action"], e["target"], e["actor"]) for e in events] == [
        ("key.created", key_id, "cli"),
        ("key.revoked", key_id, "cli"),
    ]
    assert events[0]["detail"]["scope"] == "ingest"
    assert events[0]["detail"]["model"] == "churn"
    # the command runs on the system clock; the events fall inside the test's own window
    assert all(before - timedelta(seconds=1) <= e["at"] <= after + timedelta(seconds=1) for e in events)
    assert count_rows(db, "api_keys") == 1


def test_revoking_an_unknown_key_fails_and_records_nothing(db: Database, monkeypatch, capsys) -> None:
    code, _out, err = run_cli(db, monkeypatch, capsys, "keys", "revoke", "000000000000")
    assert code == 1
    assert "000000000000" in err
    assert count_rows(db, "audit_events") == 0
