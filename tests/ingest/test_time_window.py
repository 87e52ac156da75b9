"""Stored instants must lie in [earliest, clock + tolerance] (vocabulary/instants.py InstantWindow)."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from calibrant.clock import FixedClock
from tests.api.payloads import (
    assert_nothing_stored,
    assert_problem,
    count_rows,
    post_outcomes,
    post_predictions,
    prediction,
)
from tests.conftest import Database, make_client

NOW = datetime(2026, 6, 1, 12, tzinfo=UTC)


@pytest.mark.parametrize("scored_at", ["2000-01-01T00:00:00Z", "2026-06-02T12:00:00Z",
                                       "2026-06-02T13:00:00+01:00"])
def test_both_bounds_are_inclusive(db: Database, scored_at: str) -> None:
    with make_client(db, clock=FixedClock(NOW), future_tolerance_hours=24) as client:
        response = post_predictions(client, "churn", [prediction("a", scored_at=scored_at)])
    assert response.status_code == 200, response.text


def test_the_window_is_configurable_and_follows_the_clock(db: Database) -> None:
    clock = FixedClock(NOW)
    with make_client(db, clock=clock, future_tolerance_hours=0,
                     earliest_instant=datetime(2026, 1, 1, tzinfo=UTC)) as client:
        early = post_predictions(client, "churn", [prediction("a", scored_at="2025-12-31T23:59:59Z")])
        ahead = post_predictions(client, "churn", [prediction("a", scored_at="2026-06-01T12:00:01Z")])
        assert "2026-01-01T00:00:00Z" in assert_problem(early, 422)["errors"][0]["message"]
        assert "2026-06-01T12:00:00Z" in assert_problem(ahead, 422)["errors"][0]["message"]
        assert_nothing_stored(db)
        clock.set(datetime(2026, 6, 1, 12, 0, 1, tzinfo=UTC))  # a second later it is accepted
        later = post_predictions(client, "churn", [prediction("a", scored_at="2026-06-01T12:00:01Z")])
    assert later.status_code == 200, later.text
    assert count_rows(db, "predictions") == 1


def test_every_item_outside_the_window_is_listed(db: Database) -> None:
    items = [prediction("a", scored_at="1999-01-01T00:00:00Z"), prediction("b"),
             prediction("c", scored_at="9999-12-31T23:59:59Z")]
    with make_client(db, clock=FixedClock(NOW), future_tolerance_hours=24) as client:
        body = assert_problem(post_predictions(client, "churn", items), 422)
    assert [(e["index"], e["field"]) for e in body["errors"]] == [(0, "scored_at"), (2, "scored_at")]
    assert_nothing_stored(db)


def test_an_outcome_outside_the_window_is_refused(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW), future_tolerance_hours=24) as client:
        assert post_predictions(client, "churn", [prediction("a")]).status_code == 200
        late = {"id": "a", "label": 1, "observed_at": "2099-01-01T00:00:00Z"}
        response = post_outcomes(client, "churn", [late])
    assert [e["field"] for e in assert_problem(response, 422)["errors"]] == ["observed_at"]
    assert count_rows(db, "outcomes") == 0


def test_a_naive_earliest_instant_is_refused_at_start() -> None:
    from pydantic import ValidationError

    from calibrant.config import Settings

    with pytest.raises(ValidationError, match="earliest_instant"):
        Settings(earliest_instant=datetime(2000, 1, 1))  # naive on purpose
