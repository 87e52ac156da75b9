"""Ingest bodies: shape, size and model-name rules; each refusal writes nothing."""

from __future__ import annotations

import orjson
import pytest

from tests.api.payloads import (
    assert_nothing_stored,
    assert_problem,
    count_rows,
    outcome,
    post_predictions,
    prediction,
)
from tests.conftest import Database, make_client

SMALL_LIMIT = 2048
REAL_LIMIT = 16 * 1024 * 1024

JSON = {"content-type": "application/json"}  # the only media type a body may have


def _padded_body(size: int) -> bytes:
    """A valid one-prediction body padded with JSON whitespace to exactly ``size`` bytes."""
    core = orjson.dumps({"predictions": [prediction("a")]})
    assert len(core) <= size
    return core[:-1] + b" " * (size - len(core)) + b"}"


@pytest.mark.parametrize("endpoint", ["predictions", "outcomes"])
def test_body_over_the_limit_is_413(db: Database, endpoint: str) -> None:
    with make_client(db, max_body_bytes=SMALL_LIMIT) as client:
        response = client.post(f"/v1/models/churn/{endpoint}", content=_padded_body(SMALL_LIMIT + 1),
                               headers=JSON)
    assert_problem(response, 413)
    assert_nothing_stored(db)


def test_body_exactly_at_the_limit_is_accepted(db: Database) -> None:
    with make_client(db, max_body_bytes=SMALL_LIMIT) as client:
        response = client.post("/v1/models/churn/predictions", content=_padded_body(SMALL_LIMIT),
                               headers=JSON)
    assert response.status_code == 200, response.text
    assert count_rows(db, "predictions") == 1


def test_chunked_body_without_length_is_cut_off_at_the_limit(db: Database) -> None:
    body = _padded_body(SMALL_LIMIT * 4)

    def chunks():  # a generator makes the client send Transfer-Encoding: chunked
        for start in range(0, len(body), 512):
            yield body[start : start + 512]

    with make_client(db, max_body_bytes=SMALL_LIMIT) as client:
        response = client.post("/v1/models/churn/predictions", content=chunks(), headers=JSON)
    assert_problem(response, 413)
    assert_nothing_stored(db)


def test_default_limit_refuses_a_body_over_16_mib(db: Database) -> None:
    with make_client(db) as client:
        response = client.post("/v1/models/churn/predictions", content=_padded_body(REAL_LIMIT + 1),
                               headers=JSON)
    assert_problem(response, 413)
    assert_nothing_stored(db)


def test_model_settings_body_over_its_limit_is_413(db: Database) -> None:
    description = "x" * (1024 * 1024)
    with make_client(db) as client:
        response = client.put("/v1/models/churn", json={"description": description})
    assert_problem(response, 413)
    assert_nothing_stored(db)


@pytest.mark.parametrize(
    "raw",
    [b"", b"not json", b'{"predictions": [', b'{"predictions": [{"probability": NaN}]}', b"[1e999]"],
    ids=["empty", "text", "truncated", "nan-literal", "infinite-number"],
)
def test_body_that_is_not_json_is_422(db: Database, raw: bytes) -> None:
    with make_client(db) as client:
        body = assert_problem(client.post("/v1/models/churn/predictions", content=raw, headers=JSON), 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(None, "body")]
    assert_nothing_stored(db)


@pytest.mark.parametrize(
    ("doc", "fields"),
    [
        ({"predictions": [prediction("a")], "model": "churn"}, ["model"]),
        ({"items": [prediction("a")]}, ["items", "predictions"]),
        ({"predictions": {"a": prediction("a")}}, ["predictions"]),
        ([prediction("a")], ["body"]),
    ],
    ids=["unknown-top-level-field", "wrong-member", "not-a-list", "array-body"],
)
def test_body_with_wrong_shape_is_422(db: Database, doc: object, fields: list[str]) -> None:
    with make_client(db) as client:
        response = client.post("/v1/models/churn/predictions", content=orjson.dumps(doc), headers=JSON)
    body = assert_problem(response, 422)
    assert sorted(e["field"] for e in body["errors"]) == fields
    assert all(e["index"] is None for e in body["errors"])
    assert_nothing_stored(db)


def test_more_than_10000_items_is_422(db: Database) -> None:
    items = [prediction(f"c{i}") for i in range(10_001)]
    with make_client(db) as client:
        body = assert_problem(post_predictions(client, "churn", items), 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(None, "predictions")]
    assert_nothing_stored(db)


def test_exactly_10000_items_are_accepted(db: Database) -> None:
    items = [prediction(f"c{i}", i / 10_000) for i in range(10_000)]
    with make_client(db) as client:
        response = post_predictions(client, "churn", items)
    assert response.status_code == 200, response.text
    assert response.json() == {"accepted": 10_000, "duplicates": 0, "expired": 0}
    assert count_rows(db, "predictions") == 10_000


BAD_NAMES = ["Churn", "-churn", "_churn", "a" * 65, "churn.v2", "churn%20v2", "ch%C3%BCrn"]


@pytest.mark.parametrize("name", BAD_NAMES)
@pytest.mark.parametrize(
    ("endpoint", "member", "item"),
    [("predictions", "predictions", prediction("a")), ("outcomes", "outcomes", outcome("a"))],
    ids=["predictions", "outcomes"],
)
def test_bad_model_name_is_422_and_creates_nothing(
    db: Database, name: str, endpoint: str, member: str, item: dict
) -> None:
    with make_client(db) as client:
        response = client.post(f"/v1/models/{name}/{endpoint}", json={member: [item]})
    body = assert_problem(response, 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(None, "model")]
    assert_nothing_stored(db)


def test_longest_allowed_model_name_is_accepted(db: Database) -> None:
    name = "m" + "0123456789_-" * 5 + "abc"
    assert len(name) == 64
    with make_client(db) as client:
        response = post_predictions(client, name, [prediction("a")])
    assert response.status_code == 200, response.text
    assert db.scalar("SELECT name FROM models") == name
