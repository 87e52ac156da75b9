"""The client against the real application (in-process): ingest, idempotent re-posts, problems, metrics."""

from __future__ import annotations

import shutil
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from calibrant.app import create_app
from calibrant.config import Settings
from calibrant.store.engine import make_engine
from calibrant_client import BatchingSender, CalibrantRequestError, Client

T0 = datetime(2026, 11, 2, tzinfo=UTC)  # a Monday


@pytest.fixture
def calibrant(sqlite_template: Path, tmp_path: Path) -> Iterator[Client]:
    path = tmp_path / "calibrant.db"
    shutil.copy(sqlite_template, path)
    settings = Settings(database_url=f"sqlite:///{path}")
    engine = make_engine(settings)
    app = create_app(settings, engine=engine)
    # The ASGI transport runs the app in this process: no socket, the same code paths as HTTP.
    with TestClient(app) as tc, Client("http://testserver", transport=tc._transport) as client:
        yield client
    engine.dispose()


def cases(n: int) -> list[dict]:
    return [{"id": f"order-{i}", "probability": 0.1 + 0.8 * (i % 2), "scored_at": T0 + timedelta(hours=i),
             "tags": {"depot": "harbour" if i % 2 else "hill"}} for i in range(n)]


def test_post_repost_outcomes_and_metrics(calibrant: Client) -> None:
    assert calibrant.send_predictions("late-delivery", cases(5)) == {"accepted": 5, "duplicates": 0,
                                                                     "expired": 0}
    # A batch sent again (as a retry after a lost answer would) is stored once.
    assert calibrant.send_predictions("late-delivery", cases(5)) == {"accepted": 0, "duplicates": 5,
                                                                     "expired": 0}
    outcomes = [{"id": f"order-{i}", "label": i % 2, "observed_at": T0 + timedelta(days=1)} for i in range(5)]
    answer = calibrant.send_outcomes("late-delivery", outcomes)
    assert answer == {"accepted": 5, "duplicates": 0, "corrected": 0, "expired": 0}
    job = calibrant.refresh(poll_seconds=0.05)
    assert job["state"] == "succeeded"
    assert job["progress"]["models"] == [{"model": "late-delivery", "buckets_done": 5, "buckets_total": 5}]
    out = calibrant.metrics("late-delivery", T0, T0 + timedelta(days=7), granularity="week")
    (week,) = out["periods"]
    assert (week["n_predictions"], week["n_labeled"]) == (5, 5)
    assert week["mean_probability"] == pytest.approx((0.1 * 3 + 0.9 * 2) / 5)


def test_batches_larger_than_the_server_limit_are_split(calibrant: Client) -> None:
    calibrant.batch_size = 4  # small, so the split is visible without 10,000 items
    assert calibrant.send_predictions("m", cases(10)) == {"accepted": 10, "duplicates": 0, "expired": 0}
    model = calibrant.request("GET", "/v1/models/m")
    assert model["counts"]["predictions"] == 10


def test_an_invalid_batch_raises_with_the_servers_errors(calibrant: Client) -> None:
    bad = [*cases(2), {"id": "order-9", "probability": 1.5, "scored_at": T0}]
    with pytest.raises(CalibrantRequestError) as err:
        calibrant.send_predictions("m", bad)
    assert err.value.status == 422
    assert err.value.problem["status"] == 422
    assert {(e["index"], e["field"]) for e in err.value.errors} == {(2, "probability")}
    with pytest.raises(CalibrantRequestError) as missing:
        calibrant.metrics("nobody", T0, T0 + timedelta(days=1))
    assert missing.value.status == 404


def test_buffered_logger_flushes_on_close(calibrant: Client) -> None:
    with BatchingSender(calibrant, "m", max_items=1000, max_seconds=3600) as buffer:
        for item in cases(6):
            buffer.add_prediction(item)
        buffer.add_outcome({"id": "order-0", "label": 0, "observed_at": T0 + timedelta(days=1)})
        assert buffer.pending == 7
    assert buffer.pending == 0
    counts = calibrant.request("GET", "/v1/models/m")["counts"]
    assert counts == {"predictions": 6, "outcomes": 1, "labeled": 1}


def test_buffered_logger_keeps_a_refused_batch(calibrant: Client) -> None:
    seen = []
    buffer = BatchingSender(calibrant, "m", max_items=10, max_seconds=3600, on_error=seen.append,
                            background=False)
    buffer.add_prediction({"id": "x", "probability": 2.0, "scored_at": T0})
    buffer.flush()
    assert len(buffer.failures) == 1
    assert seen == buffer.failures
    assert buffer.failures[0].items[0]["id"] == "x"
    assert isinstance(buffer.failures[0].error, CalibrantRequestError)
    buffer.close()

