"""``occurred_at`` on outcomes: optional, an RFC 3339 instant no later than ``observed_at``.

Bad values are refused with a 422 naming the item and the field, and nothing is
written; a good one is stored with the label and its history, and shown on the case.
"""

from __future__ import annotations

import pytest

from tests.api.payloads import assert_nothing_stored, assert_problem, outcome, post_outcomes
from tests.conftest import Database, make_client


@pytest.mark.parametrize(("value", "message"), [
    ("2026-03-05T08:00:00", "no UTC offset"),
    ("yesterday", "RFC 3339"),
    (17, "RFC 3339"),
    ("2026-03-05T08:00:01Z", "must not be after observed_at"),
])
def test_a_bad_occurred_at_is_refused_naming_the_field_and_nothing_is_stored(
        db: Database, value: object, message: str) -> None:
    with make_client(db) as client:
        good = outcome("a", 1)
        bad = {**outcome("b", 1), "occurred_at": value}  # observed 2026-03-05T08:00:00Z
        response = post_outcomes(client, "churn", [good, bad])
    body = assert_problem(response, 422)
    problems = [e for e in body["errors"] if e["field"] == "occurred_at"]
    assert [e["index"] for e in problems] == [1]
    assert message in problems[0]["message"]
    assert_nothing_stored(db)


def test_occurred_at_is_stored_with_the_label_and_kept_in_its_history(db: Database) -> None:
    with make_client(db) as client:
        first = {**outcome("a", 1, "2026-03-05T08:00:00Z"), "occurred_at": "2026-03-04T10:00:00+02:00"}
        assert post_outcomes(client, "churn", [first]).status_code == 200
        fix = {**outcome("a", 0, "2026-03-06T08:00:00Z")}  # a correction without occurred_at
        assert post_outcomes(client, "churn", [fix]).status_code == 200
        case = client.get("/v1/models/churn/cases/a").json()
    assert case["history"][0]["occurred_at"] == "2026-03-04T08:00:00Z"
    assert case["history"][1]["occurred_at"] is None
    assert case["outcome"]["occurred_at"] is None
    assert case["outcome"]["label"] == 0
