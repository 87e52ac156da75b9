"""Every bad or extreme input of the catalogue gets its status and writes nothing, on both databases.

"Nothing written" is checked three ways after each request: the row count of every table, the
model list, and a case look-up of the seeded model are what they were before it.
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import timedelta
from typing import Any

import pytest
from fastapi.testclient import TestClient

from calibrant.clock import FixedClock
from calibrant.store.schema import Base
from tests.api.payloads import assert_problem
from tests.conftest import Database, make_client, open_database
from tests.input.catalogue import CASES, FRESH, NOW, SEEDED, BadInput


def seed(client: TestClient) -> None:
    """The state every case runs against: traffic, an outcome, the default rules, a webhook."""
    scored = [
        {"id": f"c{i}", "probability": 0.1 + i / 20, "tags": {"region": "north"},
         "scored_at": (NOW - timedelta(days=3, hours=i)).isoformat()}
        for i in range(10)
    ]
    steps: list[tuple[str, str, Any]] = [
        ("PUT", f"/v1/models/{SEEDED}", {"segment_keys": ["region"]}),
        ("POST", f"/v1/models/{SEEDED}/predictions", {"predictions": scored}),
        ("POST", f"/v1/models/{SEEDED}/outcomes",
         {"outcomes": [{"id": "c1", "label": 1, "observed_at": "2026-05-30T00:00:00Z"}]}),
        ("GET", f"/v1/models/{SEEDED}/rules", None),  # creates the default rules
        ("POST", "/v1/webhooks", {"url": "http://127.0.0.1:9/hook"}),
    ]
    for method, path, body in steps:
        response = client.request(method, path, json=body)
        assert response.status_code < 300, response.text


def snapshot(database: Database, client: TestClient) -> dict[str, Any]:
    counts = {t.name: database.scalar(f"SELECT count(*) FROM {t.name}")  # noqa: S608  # our table names
              for t in Base.metadata.sorted_tables}
    models = client.get("/v1/models").json()
    case = client.get(f"/v1/models/{SEEDED}/cases/c1").json()
    return {"counts": counts, "models": models, "case": case}


@pytest.fixture(scope="module", params=["sqlite", "postgresql"])
def seeded(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory
           ) -> Iterator[tuple[Database, TestClient]]:
    """One seeded database per dialect for the whole catalogue: a case that wrote anything
    fails its own comparison, so sharing the state hides nothing."""
    database = open_database(request, tmp_path_factory.mktemp("catalogue"))
    with make_client(database, clock=FixedClock(NOW), webhook_allow_private=True,
                     webhook_sender="log", future_tolerance_hours=24) as client:  # the default
        seed(client)
        yield database, client
    database.engine.dispose()


def test_the_catalogue_holds_at_least_forty_cases() -> None:
    assert len(CASES) >= 40
    assert len({case.name for case in CASES}) == len(CASES)


@pytest.mark.parametrize("case", CASES, ids=[case.name for case in CASES])
def test_a_bad_input_gets_its_status_and_writes_nothing(
    seeded: tuple[Database, TestClient], case: BadInput
) -> None:
    database, client = seeded
    before = snapshot(database, client)
    response = client.request(case.method, case.path, json=case.json, content=case.content,
                              headers=case.headers, params=case.params)
    if case.status >= 400:
        body = assert_problem(response, case.status)
        if case.names_field is not None:
            assert case.names_field in {e["field"] for e in body.get("errors", [])}, body
    else:
        assert response.status_code == case.status, response.text
    assert snapshot(database, client) == before
    assert FRESH not in {m["name"] for m in before["models"]["models"]}


def test_the_nul_refusal_reads_the_same_on_both_databases(seeded: tuple[Database, TestClient]) -> None:
    _database, client = seeded
    response = client.post(f"/v1/models/{SEEDED}/predictions", json={"predictions": [
        {"id": "x\x00", "probability": 0.5, "scored_at": "2026-05-20T10:00:00Z"}]})
    assert assert_problem(response, 422)["errors"] == [
        {"index": 0, "field": "id", "message": "must not contain the NUL character (U+0000)"}
    ]


def test_a_9999_refusal_names_the_bound(seeded: tuple[Database, TestClient]) -> None:
    _database, client = seeded
    response = client.post(f"/v1/models/{SEEDED}/predictions", json={"predictions": [
        {"id": "y", "probability": 0.5, "scored_at": "9999-12-31T23:59:59Z"}]})
    (error,) = assert_problem(response, 422)["errors"]
    assert error["field"] == "scored_at"
    assert "2026-06-02T00:00:00Z" in error["message"]  # the injected clock plus one day
