"""POST /v1/models/{model}/outcomes: new, duplicate and corrected labels, joins, history."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from calibrant.clock import FixedClock
from tests.api.payloads import (
    assert_nothing_stored,
    assert_problem,
    count_rows,
    outcome,
    post_outcomes,
    post_predictions,
    prediction,
)
from tests.conftest import Database, make_client

START = datetime(2026, 3, 10, tzinfo=UTC)


@pytest.mark.parametrize(("label", "stored"), [(True, 1), (False, 0), (1, 1), (0, 0)])
def test_label_forms_are_stored_as_0_or_1(db: Database, label: object, stored: int) -> None:
    with make_client(db) as client:
        response = post_outcomes(client, "churn", [outcome("a", label)])
    assert response.status_code == 200, response.text
    assert response.json() == {"accepted": 1, "duplicates": 0, "corrected": 0, "expired": 0}
    assert db.scalar("SELECT label FROM outcomes WHERE case_id = 'a'") == stored


def test_same_label_again_is_duplicate_whatever_observed_at(db: Database) -> None:
    with make_client(db) as client:
        post_outcomes(client, "churn", [outcome("a", 1, "2026-03-05T08:00:00Z")])
        response = post_outcomes(client, "churn", [outcome("a", True, "2026-04-01T00:00:00Z")])
        case = client.get("/v1/models/churn/cases/a").json()
    assert response.json() == {"accepted": 0, "duplicates": 1, "corrected": 0, "expired": 0}
    assert case["outcome"]["observed_at"].startswith("2026-03-05T08:00:00")
    assert len(case["history"]) == 1
    assert count_rows(db, "outcome_revisions") == 1


def test_mixed_batch_counts_are_disjoint_and_sum_to_batch_size(db: Database) -> None:
    with make_client(db) as client:
        post_outcomes(client, "churn", [outcome("dup", 1), outcome("fix", 0)])
        batch = [outcome("new-1", 0), outcome("dup", 1), outcome("fix", 1), outcome("new-2", 1)]
        response = post_outcomes(client, "churn", batch)
    assert response.status_code == 200
    assert response.json() == {"accepted": 2, "duplicates": 1, "corrected": 1, "expired": 0}
    assert count_rows(db, "outcomes") == 4
    assert count_rows(db, "outcome_revisions") == 5


def test_correction_replaces_label_and_history_keeps_every_label_oldest_first(db: Database) -> None:
    clock = FixedClock(START)
    with make_client(db, clock=clock) as client:
        post_predictions(client, "churn", [prediction("a", 0.7)])
        post_outcomes(client, "churn", [outcome("a", 1, "2026-03-05T08:00:00Z")])
        clock.advance(timedelta(days=1))
        fixed = post_outcomes(client, "churn", [outcome("a", 0, "2026-03-06T08:00:00Z")])
        clock.advance(timedelta(days=1))
        back = post_outcomes(client, "churn", [outcome("a", True, "2026-03-07T08:00:00Z")])
        case = client.get("/v1/models/churn/cases/a").json()
    assert fixed.json() == back.json() == {"accepted": 0, "duplicates": 0, "corrected": 1, "expired": 0}
    assert case["outcome"]["label"] == 1
    assert case["outcome"]["revision"] == 3
    assert [h["label"] for h in case["history"]] == [1, 0, 1]
    assert [h["revision"] for h in case["history"]] == [1, 2, 3]
    received = [datetime.fromisoformat(h["received_at"]) for h in case["history"]]
    assert received == [START, START + timedelta(days=1), START + timedelta(days=2)]
    assert count_rows(db, "outcomes") == 1
    assert db.scalar("SELECT label FROM outcomes WHERE case_id = 'a'") == 1


def test_outcome_before_its_prediction_is_kept_and_joined_later(db: Database) -> None:
    with make_client(db) as client:
        assert post_outcomes(client, "churn", [outcome("early", 1)]).json()["accepted"] == 1
        waiting = client.get("/v1/models/churn").json()["counts"]
        case_before = client.get("/v1/models/churn/cases/early").json()
        post_predictions(client, "churn", [prediction("early", 0.6), prediction("other", 0.4)])
        joined = client.get("/v1/models/churn").json()["counts"]
        case_after = client.get("/v1/models/churn/cases/early").json()
    assert waiting == {"predictions": 0, "outcomes": 1, "labeled": 0}
    assert case_before["predictions"] == []
    assert case_before["outcome"]["label"] == 1
    assert joined == {"predictions": 2, "outcomes": 1, "labeled": 1}
    assert [p["probability"] for p in case_after["predictions"]] == [0.6]
    assert case_after["outcome"]["label"] == 1


def test_an_outcome_labels_every_version_of_its_case(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(
            client,
            "churn",
            [
                prediction("a", 0.2),
                prediction("a", 0.3, version="challenger"),
                prediction("a", 0.4, version="shadow"),
                prediction("b", 0.5),
            ],
        )
        response = post_outcomes(client, "churn", [outcome("a", 0)])
        counts = client.get("/v1/models/churn").json()["counts"]
        case = client.get("/v1/models/churn/cases/a").json()
    assert response.json() == {"accepted": 1, "duplicates": 0, "corrected": 0, "expired": 0}
    assert counts == {"predictions": 4, "outcomes": 1, "labeled": 3}
    assert sorted(p["version"] for p in case["predictions"]) == ["challenger", "default", "shadow"]
    assert case["outcome"]["label"] == 0


def test_outcomes_of_one_model_do_not_label_another(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a")])
        post_outcomes(client, "fraud", [outcome("a", 1)])
        churn = client.get("/v1/models/churn").json()["counts"]
    assert churn == {"predictions": 1, "outcomes": 0, "labeled": 0}


BAD_OUTCOMES = {
    "label-2": (outcome("a", 2), "label"),
    "label-string": (outcome("a", "1"), "label"),
    "label-float": (outcome("a", 1.0), "label"),
    "label-null": (outcome("a", None), "label"),
    "label-missing": ({"id": "a", "observed_at": "2026-03-05T08:00:00Z"}, "label"),
    "time-naive": (outcome("a", 1, "2026-03-05T08:00:00"), "observed_at"),
    "time-not-rfc3339": (outcome("a", 1, "5 March 2026"), "observed_at"),
    "time-missing": ({"id": "a", "label": 1}, "observed_at"),
    "id-empty": (outcome(""), "id"),
    "id-too-long": (outcome("x" * 201), "id"),
    "id-number": (outcome(7), "id"),
    "unknown-field": ({**outcome("a"), "probability": 0.5}, "probability"),
}


@pytest.mark.parametrize(("item", "field"), BAD_OUTCOMES.values(), ids=BAD_OUTCOMES.keys())
def test_bad_outcome_is_422_and_writes_nothing(db: Database, item: dict, field: str) -> None:
    with make_client(db) as client:
        response = post_outcomes(client, "churn", [outcome("fine"), item])
    body = assert_problem(response, 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(1, field)]
    assert_nothing_stored(db)


def test_repeated_id_in_one_outcome_batch_is_422(db: Database) -> None:
    with make_client(db) as client:
        body = assert_problem(post_outcomes(client, "churn", [outcome("a", 1), outcome("a", 0)]), 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(1, "id")]
    assert_nothing_stored(db)


def test_unknown_top_level_field_in_outcomes_is_422(db: Database) -> None:
    with make_client(db) as client:
        response = client.post("/v1/models/churn/outcomes", json={"outcomes": [], "labels": []})
    body = assert_problem(response, 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(None, "labels")]
    assert_nothing_stored(db)
