"""Small builders for ingest bodies and database counts shared by the API tests."""

from __future__ import annotations

from typing import Any

from fastapi.testclient import TestClient

from tests.conftest import Database

T0 = "2026-03-01T12:00:00Z"
PROBLEM_MEDIA_TYPE = "application/problem+json"


def prediction(case_id: str, probability: float = 0.25, scored_at: str = T0, **extra: Any) -> dict:
    return {"id": case_id, "probability": probability, "scored_at": scored_at, **extra}


def outcome(case_id: str, label: Any = 1, observed_at: str = "2026-03-05T08:00:00Z") -> dict:
    return {"id": case_id, "label": label, "observed_at": observed_at}


def post_predictions(client: TestClient, model: str, items: list[dict], **kwargs: Any):
    return client.post(f"/v1/models/{model}/predictions", json={"predictions": items}, **kwargs)


def post_outcomes(client: TestClient, model: str, items: list[dict], **kwargs: Any):
    return client.post(f"/v1/models/{model}/outcomes", json={"outcomes": items}, **kwargs)


def count_rows(db: Database, table: str) -> int:
    # Table names come from the tests themselves, never from input.
    return int(db.scalar(f"SELECT COUNT(*) FROM {table}"))  # noqa: S608


def assert_problem(response, status: int) -> dict:
    """The response is an RFC 9457 problem document with ``status``; returns its body."""
    assert response.status_code == status, response.text
    assert response.headers["content-type"].startswith(PROBLEM_MEDIA_TYPE)
    body = response.json()
    assert body["status"] == status
    for member in ("type", "title", "detail"):
        assert isinstance(body[member], str)
        assert body[member]
    return body


def assert_nothing_stored(db: Database) -> None:
    for table in ("models", "predictions", "outcomes", "outcome_revisions", "audit_events"):
        assert count_rows(db, table) == 0, table
