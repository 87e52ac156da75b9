"""Invalid prediction batches: 422 problem listing every bad item, and nothing written.

Every case posts to an empty database, so "nothing written" includes the
model row that a first ingest would otherwise create.
"""

from __future__ import annotations

import pytest

from tests.api.payloads import (
    T0,
    assert_nothing_stored,
    assert_problem,
    count_rows,
    post_predictions,
    prediction,
)
from tests.conftest import Database, make_client

MANY_TAGS = {f"k{i}": "v" for i in range(17)}

BAD_ITEMS = {
    "probability-string": (prediction("a", "0.5"), "probability"),
    "probability-bool": (prediction("a", True), "probability"),
    "probability-null": (prediction("a", None), "probability"),
    "probability-nan-string": (prediction("a", "NaN"), "probability"),
    "probability-infinity-string": (prediction("a", "Infinity"), "probability"),
    "probability-below-0": (prediction("a", -0.000001), "probability"),
    "probability-above-1": (prediction("a", 1.000001), "probability"),
    "probability-missing": ({"id": "a", "scored_at": T0}, "probability"),
    "time-naive": (prediction("a", scored_at="2026-03-01T12:00:00"), "scored_at"),
    "time-date-only": (prediction("a", scored_at="2026-03-01"), "scored_at"),
    "time-compact-offset": (prediction("a", scored_at="2026-03-01T12:00:00+0200"), "scored_at"),
    "time-us-format": (prediction("a", scored_at="03/01/2026 12:00:00Z"), "scored_at"),
    "time-epoch-number": (prediction("a", scored_at=1772366400), "scored_at"),
    "time-impossible-date": (prediction("a", scored_at="2026-02-30T12:00:00Z"), "scored_at"),
    "time-hour-25": (prediction("a", scored_at="2026-03-01T25:00:00Z"), "scored_at"),
    "time-missing": ({"id": "a", "probability": 0.5}, "scored_at"),
    "id-empty": (prediction(""), "id"),
    "id-too-long": (prediction("x" * 201), "id"),
    "id-number": (prediction(42), "id"),
    "id-missing": ({"probability": 0.5, "scored_at": T0}, "id"),
    "tags-17-keys": (prediction("a", tags=MANY_TAGS), "tags"),
    "tags-not-object": (prediction("a", tags=["region", "north"]), "tags"),
    "tag-value-number": (prediction("a", tags={"region": 3}), "tags.region"),
    "tag-value-null": (prediction("a", tags={"region": None}), "tags.region"),
    "tag-value-object": (prediction("a", tags={"region": {"x": "y"}}), "tags.region"),
    "tag-value-too-long": (prediction("a", tags={"region": "x" * 129}), "tags.region"),
    "tag-key-with-space": (prediction("a", tags={"bad key": "x"}), "tags.bad key"),
    "version-empty": (prediction("a", version=""), "version"),
    "version-too-long": (prediction("a", version="v" * 65), "version"),
    "version-number": (prediction("a", version=2), "version"),
    "unknown-item-field": (prediction("a", prob=0.5), "prob"),
    "item-not-object": ("a", "item"),
}


@pytest.mark.parametrize(("item", "field"), BAD_ITEMS.values(), ids=BAD_ITEMS.keys())
def test_bad_item_is_422_naming_index_and_field(db: Database, item: object, field: str) -> None:
    with make_client(db) as client:
        response = post_predictions(client, "churn", [prediction("ok-0"), item])
    body = assert_problem(response, 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(1, field)]
    assert body["errors"][0]["message"]
    assert_nothing_stored(db)


def test_every_bad_item_is_listed(db: Database) -> None:
    batch = [
        prediction("bad-p", 2.0),
        prediction("good-1"),
        prediction("bad-t", scored_at="2026-03-01T12:00:00"),
        prediction("good-2"),
        prediction("", -1.0),
    ]
    with make_client(db) as client:
        body = assert_problem(post_predictions(client, "churn", batch), 422)
    listed = sorted((e["index"], e["field"]) for e in body["errors"])
    assert listed == [(0, "probability"), (2, "scored_at"), (4, "id"), (4, "probability")]
    assert_nothing_stored(db)


def test_boundary_values_are_accepted(db: Database) -> None:
    batch = [
        prediction("x" * 200, 0.0),
        prediction("sixteen-tags", 1.0, tags={f"k{i}": "v" * 128 for i in range(16)}),
        prediction("lower-z", scored_at="2026-03-01t12:00:00z"),
        prediction("integer-p", 1),
    ]
    with make_client(db) as client:
        response = post_predictions(client, "churn", batch)
    assert response.status_code == 200, response.text
    assert response.json() == {"accepted": 4, "duplicates": 0, "expired": 0}
    assert count_rows(db, "predictions") == 4


def test_repeated_version_and_id_in_one_batch_is_422(db: Database) -> None:
    batch = [prediction("a"), prediction("a", version="v2"), prediction("a", 0.25)]
    with make_client(db) as client:
        body = assert_problem(post_predictions(client, "churn", batch), 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(2, "id")]
    assert_nothing_stored(db)


def test_repeated_id_is_422_even_when_content_is_identical(db: Database) -> None:
    with make_client(db) as client:
        body = assert_problem(post_predictions(client, "churn", [prediction("a"), prediction("a")]), 422)
    assert [e["index"] for e in body["errors"]] == [1]
    assert_nothing_stored(db)


def test_invalid_batch_after_valid_one_leaves_earlier_rows_alone(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a")])
        response = post_predictions(client, "churn", [prediction("b"), prediction("c", 7)])
    assert_problem(response, 422)
    assert count_rows(db, "predictions") == 1
    assert db.scalar("SELECT case_id FROM predictions") == "a"
