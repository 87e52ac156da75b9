"""POST /v1/models/{model}/predictions: counting, idempotence, conflicts, versions, tags."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta

import pytest

from calibrant.clock import FixedClock
from tests.api.payloads import (
    assert_problem,
    count_rows,
    post_predictions,
    prediction,
)
from tests.conftest import Database, make_client


def test_new_batch_is_accepted_and_stored_exactly(db: Database) -> None:
    with make_client(db) as client:
        items = [prediction("a", 0.30000000000000004), prediction("b", 0.0), prediction("c", 1.0)]
        response = post_predictions(client, "churn", items)
    assert response.status_code == 200, response.text
    assert response.json() == {"accepted": 3, "duplicates": 0, "expired": 0}
    assert count_rows(db, "predictions") == 3
    # float64 round trip: a float32 column would lose the last digits
    assert db.scalar("SELECT probability FROM predictions WHERE case_id = 'a'") == 0.30000000000000004


def test_identical_repost_is_duplicate_and_changes_nothing(db: Database) -> None:
    clock = FixedClock(datetime(2026, 3, 2, tzinfo=UTC))
    with make_client(db, clock=clock) as client:
        first = [prediction("a"), prediction("b", 0.9, tags={"region": "north"})]
        answer = post_predictions(client, "churn", first).json()
        assert answer == {"accepted": 2, "duplicates": 0, "expired": 0}
        received_first = client.get("/v1/models/churn/cases/a").json()["predictions"][0]["received_at"]
        clock.advance(timedelta(hours=1))
        again = [*first, prediction("c"), prediction("d")]
        response = post_predictions(client, "churn", again)
        assert response.status_code == 200
        assert response.json() == {"accepted": 2, "duplicates": 2, "expired": 0}
        case_a = client.get("/v1/models/churn/cases/a").json()
    assert count_rows(db, "predictions") == 4
    assert case_a["predictions"][0]["received_at"] == received_first


@pytest.mark.parametrize(
    "same_instant",
    ["2026-03-01T14:00:00+02:00", "2026-03-01T07:00:00-05:00", "2026-03-01T12:00:00.000Z"],
)
def test_same_instant_in_another_form_is_duplicate(db: Database, same_instant: str) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a", scored_at="2026-03-01T12:00:00Z")])
        response = post_predictions(client, "churn", [prediction("a", scored_at=same_instant)])
    assert response.status_code == 200, response.text
    assert response.json() == {"accepted": 0, "duplicates": 1, "expired": 0}
    assert count_rows(db, "predictions") == 1


@pytest.mark.parametrize(
    "changed",
    [
        {"probability": 0.2500001},
        {"scored_at": "2026-03-01T12:00:00.000001Z"},
        {"scored_at": "2026-03-01T12:00:00+01:00"},
        {"tags": {"region": "south"}},
        {"tags": {"region": "north", "channel": "web"}},
        {"tags": None},
    ],
    ids=["probability", "microsecond", "offset-not-instant", "tag-value", "extra-tag", "tags-removed"],
)
def test_changed_content_rejects_whole_batch_with_409(db: Database, changed: dict) -> None:
    original = prediction("a", 0.25, tags={"region": "north"})
    with make_client(db) as client:
        post_predictions(client, "churn", [original, prediction("b")])
        altered = {**original, **changed}
        if changed.get("tags", "") is None:
            del altered["tags"]
        batch = [prediction("new-1"), altered, prediction("b"), prediction("new-2")]
        response = post_predictions(client, "churn", batch)
        body = assert_problem(response, 409)
        assert body["conflicts"] == [{"index": 1, "id": "a", "version": "default"}]
        stored = client.get("/v1/models/churn/cases/a").json()["predictions"]
    # the two new items of the rejected batch were not stored either
    assert count_rows(db, "predictions") == 2
    assert db.scalar("SELECT COUNT(*) FROM predictions WHERE case_id LIKE 'new-%'") == 0
    assert stored[0]["probability"] == 0.25
    assert stored[0]["tags"] == {"region": "north"}


def test_conflicts_list_every_offending_item_in_batch_order(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a"), prediction("b", version="v2")])
        batch = [
            prediction("x"),
            prediction("b", 0.5, version="v2"),
            prediction("a", 0.75, version="v2"),  # new: (v2, a) was never posted
            prediction("a", 0.5),
        ]
        body = assert_problem(post_predictions(client, "churn", batch), 409)
    assert body["conflicts"] == [
        {"index": 1, "id": "b", "version": "v2"},
        {"index": 3, "id": "a", "version": "default"},
    ]
    assert count_rows(db, "predictions") == 2


def test_same_id_under_another_version_is_a_new_prediction(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a", 0.2)])
        response = post_predictions(client, "churn", [prediction("a", 0.8, version="challenger")])
        assert response.json() == {"accepted": 1, "duplicates": 0, "expired": 0}
        case = client.get("/v1/models/churn/cases/a").json()
    by_version = {p["version"]: p["probability"] for p in case["predictions"]}
    assert by_version == {"default": 0.2, "challenger": 0.8}
    assert count_rows(db, "predictions") == 2


def test_omitted_version_is_stored_as_default(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a")])
        again = post_predictions(client, "churn", [prediction("a", version="default")])
    assert again.json() == {"accepted": 0, "duplicates": 1, "expired": 0}
    assert db.scalar("SELECT version FROM predictions WHERE case_id = 'a'") == "default"


def test_tags_are_stored_canonically_so_key_order_does_not_matter(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a", tags={"b": "2", "a": "1"})])
        post_predictions(client, "churn", [prediction("z", tags={"a": "1", "b": "2"})])
        reordered = post_predictions(client, "churn", [prediction("a", tags={"a": "1", "b": "2"})])
        case = client.get("/v1/models/churn/cases/a").json()
    assert reordered.status_code == 200
    assert reordered.json() == {"accepted": 0, "duplicates": 1, "expired": 0}
    stored_a = db.scalar("SELECT tags FROM predictions WHERE case_id = 'a'")
    stored_z = db.scalar("SELECT tags FROM predictions WHERE case_id = 'z'")
    assert stored_a == stored_z
    assert json.loads(stored_a) == {"a": "1", "b": "2"}
    assert case["predictions"][0]["tags"] == {"a": "1", "b": "2"}


def test_empty_batch_accepts_nothing(db: Database) -> None:
    with make_client(db) as client:
        response = post_predictions(client, "churn", [])
    assert response.status_code == 200
    assert response.json() == {"accepted": 0, "duplicates": 0, "expired": 0}
    assert count_rows(db, "predictions") == 0


def test_models_keep_their_predictions_apart(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a", 0.1)])
        response = post_predictions(client, "fraud", [prediction("a", 0.9)])
        assert response.json() == {"accepted": 1, "duplicates": 0, "expired": 0}
        churn = client.get("/v1/models/churn").json()["counts"]
        fraud = client.get("/v1/models/fraud").json()["counts"]
    assert churn["predictions"] == fraud["predictions"] == 1


def test_ids_are_compared_exactly(db: Database) -> None:
    ids = ["case", "Case", "case ", "cäse", "case\u0301"]
    with make_client(db) as client:
        response = post_predictions(client, "churn", [prediction(i) for i in ids])
        again = post_predictions(client, "churn", [prediction(i) for i in ids])
        fetched = client.get("/v1/models/churn/cases/Case").json()
    assert response.json() == {"accepted": 5, "duplicates": 0, "expired": 0}
    assert again.json() == {"accepted": 0, "duplicates": 5, "expired": 0}
    assert fetched["id"] == "Case"
    assert len(fetched["predictions"]) == 1
