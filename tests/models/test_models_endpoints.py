"""Model endpoints: creation with defaults, PUT merge semantics, invalid settings, lookups."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from calibrant.clock import FixedClock
from tests.api.payloads import assert_nothing_stored, assert_problem, count_rows, post_predictions, prediction
from tests.conftest import Database, make_client

START = datetime(2026, 3, 1, 9, 30, tzinfo=UTC)
DEFAULTS = {
    "description": "",
    "outcome_horizon_days": None,
    "outcome_lag_days": 0,
    "implicit_negatives": False,
    "segment_keys": [],
    "reference": None,
}
REFERENCE = {"kind": "traffic", "start": "2026-01-01T00:00:00Z", "end": "2026-02-01T00:00:00Z"}


def _settings(model: dict) -> dict:
    return {key: model[key] for key in DEFAULTS}


def test_first_ingest_creates_model_with_defaults(db: Database) -> None:
    with make_client(db, clock=FixedClock(START)) as client:
        post_predictions(client, "churn", [prediction("a")])
        model = client.get("/v1/models/churn").json()
    assert model["name"] == "churn"
    assert _settings(model) == DEFAULTS
    assert datetime.fromisoformat(model["created_at"]) == START
    assert model["counts"] == {"predictions": 1, "outcomes": 0, "labeled": 0}


def test_put_creates_with_201_and_stores_settings(db: Database) -> None:
    body = {
        "description": "Churn within 30 days",
        "outcome_horizon_days": 30,
        "outcome_lag_days": 2,
        "implicit_negatives": True,
        "segment_keys": ["region", "plan.tier"],
        "reference": REFERENCE,
    }
    with make_client(db, clock=FixedClock(START)) as client:
        response = client.put("/v1/models/churn", json=body)
        fetched = client.get("/v1/models/churn").json()
    assert response.status_code == 201, response.text
    created = response.json()
    plain = [k for k in body if k != "reference"]
    assert {k: created[k] for k in plain} == {k: body[k] for k in plain}
    assert created["reference"]["kind"] == "traffic"
    assert datetime.fromisoformat(created["reference"]["start"]) == datetime(2026, 1, 1, tzinfo=UTC)
    assert _settings(fetched) == _settings(created)
    assert count_rows(db, "models") == 1
    assert db.scalar("SELECT outcome_horizon_days FROM models WHERE name = 'churn'") == 30


def test_put_with_empty_object_creates_with_defaults(db: Database) -> None:
    with make_client(db) as client:
        response = client.put("/v1/models/churn", json={})
    assert response.status_code == 201
    assert _settings(response.json()) == DEFAULTS


def test_put_on_existing_model_merges_and_keeps_absent_fields(db: Database) -> None:
    clock = FixedClock(START)
    with make_client(db, clock=clock) as client:
        client.put(
            "/v1/models/churn",
            json={"description": "first", "outcome_horizon_days": 30, "segment_keys": ["region"]},
        )
        clock.advance(timedelta(hours=2))
        response = client.put("/v1/models/churn", json={"outcome_lag_days": 3})
    assert response.status_code == 200, response.text
    model = response.json()
    assert _settings(model) == {
        **DEFAULTS,
        "description": "first",
        "outcome_horizon_days": 30,
        "outcome_lag_days": 3,
        "segment_keys": ["region"],
    }
    assert datetime.fromisoformat(model["created_at"]) == START
    assert datetime.fromisoformat(model["updated_at"]) == START + timedelta(hours=2)


def test_explicit_null_clears_horizon_and_reference(db: Database) -> None:
    with make_client(db) as client:
        client.put("/v1/models/churn", json={"outcome_horizon_days": 30, "reference": REFERENCE})
        response = client.put("/v1/models/churn", json={"outcome_horizon_days": None, "reference": None})
        model = client.get("/v1/models/churn").json()
    assert response.status_code == 200, response.text
    assert model["outcome_horizon_days"] is None
    assert model["reference"] is None
    assert db.scalar("SELECT outcome_horizon_days FROM models") is None


INVALID_SETTINGS = {
    "five-segment-keys": ({"segment_keys": ["a", "b", "c", "d", "e"]}, "segment_keys"),
    "repeated-segment-keys": ({"segment_keys": ["region", "region"]}, "segment_keys"),
    "segment-key-with-space": ({"segment_keys": ["bad key"]}, "segment_keys.0"),
    "implicit-without-horizon": ({"implicit_negatives": True}, "implicit_negatives"),
    "horizon-zero": ({"outcome_horizon_days": 0}, "outcome_horizon_days"),
    "horizon-text": ({"outcome_horizon_days": "ten"}, "outcome_horizon_days"),
    "lag-negative": ({"outcome_lag_days": -1}, "outcome_lag_days"),
    "reference-reversed": ({"reference": {**REFERENCE, "end": "2025-12-01T00:00:00Z"}}, "reference"),
    "reference-naive": ({"reference": {**REFERENCE, "start": "2026-01-01T00:00:00"}}, "reference.start"),
    "unknown-field": ({"horizon": 30}, "horizon"),
}


@pytest.mark.parametrize(("body", "field"), INVALID_SETTINGS.values(), ids=INVALID_SETTINGS.keys())
def test_invalid_settings_are_422_naming_the_field_and_create_nothing(
    db: Database, body: dict, field: str
) -> None:
    with make_client(db) as client:
        response = client.put("/v1/models/churn", json=body)
    problem = assert_problem(response, 422)
    assert [e["field"] for e in problem["errors"]] == [field]
    assert_nothing_stored(db)


def test_clearing_horizon_while_implicit_negatives_is_on_is_refused(db: Database) -> None:
    with make_client(db) as client:
        client.put("/v1/models/churn", json={"outcome_horizon_days": 30, "implicit_negatives": True})
        response = client.put("/v1/models/churn", json={"outcome_horizon_days": None})
        model = client.get("/v1/models/churn").json()
    problem = assert_problem(response, 422)
    assert [e["field"] for e in problem["errors"]] == ["implicit_negatives"]
    assert model["outcome_horizon_days"] == 30


def test_put_body_that_is_not_json_is_422(db: Database) -> None:
    with make_client(db) as client:
        response = client.put(
            "/v1/models/churn", content=b"{description: x}", headers={"content-type": "application/json"}
        )
    assert_problem(response, 422)
    assert_nothing_stored(db)


def test_list_models_returns_all_by_name(db: Database) -> None:
    with make_client(db) as client:
        empty = client.get("/v1/models").json()
        post_predictions(client, "fraud", [prediction("a")])
        client.put("/v1/models/churn", json={"description": "c"})
        listed = client.get("/v1/models").json()
    assert empty == {"models": [], "count": 0}
    assert listed["count"] == 2
    assert [m["name"] for m in listed["models"]] == ["churn", "fraud"]
    assert listed["models"][0]["description"] == "c"


def test_unknown_model_is_404_problem(db: Database) -> None:
    with make_client(db) as client:
        assert_problem(client.get("/v1/models/nobody"), 404)
        assert_problem(client.get("/v1/models/nobody/cases/a"), 404)


def test_unknown_case_of_known_model_is_404_problem(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a")])
        assert client.get("/v1/models/churn/cases/a").status_code == 200
        assert_problem(client.get("/v1/models/churn/cases/b"), 404)


def test_get_with_invalid_model_name_is_422(db: Database) -> None:
    with make_client(db) as client:
        problem = assert_problem(client.get("/v1/models/Not.Valid"), 422)
    assert [e["field"] for e in problem["errors"]] == ["model"]
