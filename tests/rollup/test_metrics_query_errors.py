"""Bad query parameters of the metrics and reliability endpoints: 422 naming the field, never 500."""

from __future__ import annotations

import pytest

from tests.api.payloads import assert_problem, post_predictions, prediction
from tests.conftest import Database, make_client

GOOD = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-09T00:00:00Z"}
METRICS_CASES = [
    ({"granularity": "year"}, "granularity"),
    ({"window": "0d"}, "window"),
    ({"window": "367d"}, "window"),
    ({"window": "abc"}, "window"),
    ({"window": "7"}, "window"),
    ({"start": "2026-03-02T00:00:00"}, "start"),  # naive
    ({"end": "2026-03-09"}, "end"),  # a date, not an instant with offset
    ({"start": None}, "start"),  # missing
    ({"end": "2026-03-02T00:00:00Z"}, "end"),  # end == start
    ({"end": "2026-03-01T00:00:00Z"}, "end"),  # end < start
    ({"tag": ["depot:hill", "depot:harbour"]}, "tag"),  # two filters
    ({"tag": ["region:north"]}, "tag"),  # undeclared key
    ({"tag": ["depot"]}, "tag"),  # no value
    ({"granularity": "day", "start": "2000-01-01T00:00:00Z"}, "start"),  # too many periods
]
RELIABILITY_CASES = [
    ({"bins": "3"}, "bins"),  # does not divide 20
    ({"bins": "0"}, "bins"),
    ({"bins": "-4"}, "bins"),
    ({"bins": "60", "strategy": "quantile"}, "bins"),
    ({"strategy": "sideways"}, "strategy"),
    ({"start": "2026-03-02T00:00:00"}, "start"),
    ({"tag": ["depot:hill", "depot:hill"]}, "tag"),
]


@pytest.fixture
def client(db: Database):
    with make_client(db) as c:
        c.put("/v1/models/errs", json={"segment_keys": ["depot"]})
        post_predictions(c, "errs", [prediction("a", tags={"depot": "hill"})])
        yield c


def query(overrides: dict) -> dict:
    params = {**GOOD, **overrides}
    return {k: v for k, v in params.items() if v is not None}


@pytest.mark.parametrize(("overrides", "field"), METRICS_CASES)
def test_metrics_parameter_errors_name_the_field(client, overrides: dict, field: str) -> None:
    body = assert_problem(client.get("/v1/models/errs/metrics", params=query(overrides)), 422)
    assert field in [e["field"] for e in body["errors"]], body


@pytest.mark.parametrize(("overrides", "field"), RELIABILITY_CASES)
def test_reliability_parameter_errors_name_the_field(client, overrides: dict, field: str) -> None:
    body = assert_problem(client.get("/v1/models/errs/reliability", params=query(overrides)), 422)
    assert field in [e["field"] for e in body["errors"]], body


def test_unknown_model_is_404(client) -> None:
    assert_problem(client.get("/v1/models/nobody/metrics", params=GOOD), 404)


def test_the_good_query_is_accepted(client) -> None:
    assert client.get("/v1/models/errs/metrics", params={**GOOD, "tag": "depot:hill", "window": "366d"}
                      ).status_code == 200
