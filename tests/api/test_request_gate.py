"""The request gate (api/request_gate.py): what a body may be sent as, and what passes untouched."""

from __future__ import annotations

import gzip

import orjson
import pytest

from tests.api.payloads import assert_nothing_stored, assert_problem, count_rows, prediction
from tests.conftest import Database, make_client

BODY = orjson.dumps({"predictions": [prediction("a")]})


@pytest.mark.parametrize(
    "content_type",
    ["application/json", "application/json; charset=utf-8", "Application/JSON;charset=UTF-8",
     "application/json; charset=latin-1"],
)
def test_json_with_any_charset_is_accepted(db: Database, content_type: str) -> None:
    with make_client(db) as client:
        response = client.post("/v1/models/churn/predictions", content=BODY,
                               headers={"content-type": content_type})
    assert response.status_code == 200, response.text
    assert count_rows(db, "predictions") == 1


def test_a_gzip_body_is_decoded(db: Database) -> None:
    with make_client(db) as client:
        response = client.post("/v1/models/churn/predictions", content=gzip.compress(BODY),
                               headers={"content-type": "application/json", "content-encoding": "gzip"})
    assert response.status_code == 200, response.text
    assert response.json()["accepted"] == 1


def test_a_gzip_body_counts_against_the_cap_once_decoded(db: Database) -> None:
    padded = BODY[:-1] + b" " * 4096 + b"}"
    with make_client(db, max_body_bytes=2048) as client:
        response = client.post("/v1/models/churn/predictions", content=gzip.compress(padded),
                               headers={"content-type": "application/json", "content-encoding": "gzip"})
    assert "2048" in assert_problem(response, 413)["detail"]
    assert_nothing_stored(db)


@pytest.mark.parametrize(
    "content_type",
    ["text/plain", "application/x-www-form-urlencoded", "multipart/form-data; boundary=b", None],
)
def test_any_other_media_type_is_415_naming_json(db: Database, content_type: str | None) -> None:
    headers = {} if content_type is None else {"content-type": content_type}
    with make_client(db) as client:
        response = client.post("/v1/models/churn/predictions", content=BODY, headers=headers)
    body = assert_problem(response, 415)
    assert "application/json" in body["detail"]
    assert body["accepted"] == {"media_types": ["application/json"], "encodings": ["gzip", "identity"]}
    assert_nothing_stored(db)


def test_requests_without_a_body_need_no_media_type(db: Database) -> None:
    with make_client(db) as client:
        assert client.get("/v1/models", headers={"content-type": "text/plain"}).status_code == 200
        assert client.post("/v1/refresh?wait=true").status_code == 200
        empty = client.post("/v1/models/churn/predictions", headers={"content-type": "text/plain"})
    assert_problem(empty, 422)  # an empty body reaches the route, which says it is not JSON


def test_a_webhook_body_as_a_form_is_415(db: Database) -> None:
    with make_client(db, webhook_allow_private=True) as client:
        response = client.post("/v1/webhooks", data={"url": "http://127.0.0.1:9/x"})
        listed = client.get("/v1/webhooks").json()
    assert_problem(response, 415)
    assert listed["count"] == 0


def test_an_escaped_backslash_before_u0000_is_not_a_nul(db: Database) -> None:
    # The JSON text \\u0000 is a backslash followed by "u0000": a legal id, stored as sent.
    raw = b'{"predictions": [{"id": "a\\\\u0000", "probability": 0.5, "scored_at": "2026-03-02T00:00:00Z"}]}'
    with make_client(db) as client:
        response = client.post("/v1/models/churn/predictions", content=raw,
                               headers={"content-type": "application/json"})
        case = client.get("/v1/models/churn/cases/a%5Cu0000")
    assert response.status_code == 200, response.text
    assert case.status_code == 200, case.text
