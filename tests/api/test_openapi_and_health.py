"""The OpenAPI document describes the ingest bodies; /docs and /healthz answer."""

from __future__ import annotations

from fastapi.testclient import TestClient

from calibrant.app import create_app
from calibrant.config import Settings
from tests.api.payloads import post_predictions, prediction
from tests.conftest import Database, make_client


def _resolve(document: dict, schema: dict) -> dict:
    ref = schema.get("$ref")
    if ref is None:
        return schema
    name = ref.removeprefix("#/components/schemas/")
    return document["components"]["schemas"][name]


def test_openapi_documents_ingest_request_bodies(db: Database) -> None:
    with make_client(db) as client:
        document = client.get("/openapi.json").json()
    paths = document["paths"]
    for path, component, member in [
        ("/v1/models/{model}/predictions", "PredictionBatchIn", "predictions"),
        ("/v1/models/{model}/outcomes", "OutcomeBatchIn", "outcomes"),
    ]:
        body = paths[path]["post"]["requestBody"]["content"]["application/json"]["schema"]
        assert body == {"$ref": f"#/components/schemas/{component}"}
        schema = _resolve(document, body)
        assert schema["required"] == [member]
        assert schema["properties"][member]["maxItems"] == 10_000
        assert schema["additionalProperties"] is False
        item = _resolve(document, schema["properties"][member]["items"])
        assert item["additionalProperties"] is False
    prediction_item = document["components"]["schemas"]["PredictionIn"]
    assert set(prediction_item["required"]) == {"id", "probability", "scored_at"}
    assert prediction_item["properties"]["probability"]["minimum"] == 0
    assert prediction_item["properties"]["probability"]["maximum"] == 1
    assert prediction_item["properties"]["id"]["maxLength"] == 200
    assert set(document["components"]["schemas"]["OutcomeIn"]["required"]) == {"id", "label", "observed_at"}


def test_openapi_documents_model_settings_body_and_error_responses(db: Database) -> None:
    with make_client(db) as client:
        document = client.get("/openapi.json").json()
    put = document["paths"]["/v1/models/{model}"]["put"]
    schema = _resolve(document, put["requestBody"]["content"]["application/json"]["schema"])
    assert set(schema["properties"]) == {
        "description",
        "outcome_horizon_days",
        "outcome_lag_days",
        "implicit_negatives",
        "segment_keys",
        "reference",
        "false_alarms_per_year",
        "retention_days",
    }
    assert {"401", "403", "422"} <= set(put["responses"])
    post = document["paths"]["/v1/models/{model}/predictions"]["post"]
    assert {"409", "413", "422"} <= set(post["responses"])


def test_docs_page_is_served(db: Database) -> None:
    with make_client(db) as client:
        response = client.get("/docs")
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/html")
    assert "/openapi.json" in response.text


def test_healthz_reports_database_ok(db: Database) -> None:
    with make_client(db) as client:
        post_predictions(client, "churn", [prediction("a")])
        response = client.get("/healthz")
    assert response.status_code == 200
    body = response.json()
    assert body["status"] == "ok"
    assert body["database"] == "ok"


def test_healthz_needs_no_key_even_when_keys_are_required(db: Database) -> None:
    with make_client(db, auth="required") as client:
        response = client.get("/healthz")
    assert response.status_code == 200
    assert response.json()["database"] == "ok"


def test_healthz_is_503_when_the_database_cannot_be_reached() -> None:
    # Port 1 on loopback refuses connections at once, so this needs no timeout.
    settings = Settings(database_url="postgresql+psycopg://postgres@127.0.0.1:1/none")
    with TestClient(create_app(settings)) as client:
        response = client.get("/healthz")
    assert response.status_code == 503
    assert response.json()["database"] == "unreachable"
