"""Client behaviour against scripted answers (httpx.MockTransport): retries, backoff, errors, batching."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta, timezone

import httpx
import pytest

from calibrant_client import (
    CalibrantRequestError,
    CalibrantUnavailableError,
    Client,
    retry_after_seconds,
)

T = datetime(2026, 11, 2, 8, 15, tzinfo=UTC)
NOW = 1_800_000_000.0  # wall clock handed to the client, for HTTP-date Retry-After


class Script:
    """Answers requests from a list of replies (a Response or an exception to raise), recording each."""

    def __init__(self, *replies):
        self.replies = list(replies)
        self.requests: list[httpx.Request] = []

    def __call__(self, request: httpx.Request) -> httpx.Response:
        self.requests.append(request)
        reply = self.replies.pop(0) if self.replies else httpx.Response(200, json={"accepted": 0})
        if isinstance(reply, Exception):
            raise reply
        return reply

    def bodies(self) -> list[dict]:
        return [json.loads(r.content) for r in self.requests]


def make(script: Script, **options) -> tuple[Client, list[float]]:
    slept: list[float] = []
    client = Client("http://calibrant.test", api_key="cal_k", transport=httpx.MockTransport(script),
                    sleep=slept.append, wall_clock=lambda: NOW, **options)
    return client, slept


def pred(i: int) -> dict:
    return {"id": f"c{i}", "probability": 0.25, "scored_at": T}


def test_transient_failures_are_retried_with_growing_bounded_backoff() -> None:
    script = Script(httpx.ConnectError("refused"), httpx.ReadTimeout("slow"), httpx.Response(502),
                    httpx.Response(504), httpx.Response(200, json={"accepted": 0, "duplicates": 1}))
    client, slept = make(script, backoff_base=0.5, backoff_max=1.5)
    assert client.send_predictions("m", [pred(1)]) == {"accepted": 0, "duplicates": 1}
    assert len(script.requests) == 5
    assert slept == [0.5, 1.0, 1.5, 1.5]  # doubling, capped at backoff_max
    # Every attempt sent the very same batch: safe, because the server treats it as duplicates.
    assert all(b == script.bodies()[0] for b in script.bodies())
    assert script.requests[0].headers["authorization"] == "Bearer cal_k"


def test_retry_after_is_honoured_in_seconds_and_as_an_http_date() -> None:
    date = (datetime.fromtimestamp(NOW, UTC) + timedelta(seconds=7)).strftime("%a, %d %b %Y %H:%M:%S GMT")
    script = Script(httpx.Response(429, headers={"Retry-After": "12"}),
                    httpx.Response(503, headers={"Retry-After": date}),
                    httpx.Response(200, json={"accepted": 1}))
    client, slept = make(script)
    client.send_predictions("m", [pred(1)])
    assert slept == [12.0, 7.0]


def test_retry_after_beyond_the_limit_gives_up_at_once() -> None:
    script = Script(httpx.Response(503, headers={"Retry-After": "3600"}))
    client, slept = make(script, max_retry_after=60)
    with pytest.raises(CalibrantUnavailableError) as err:
        client.send_predictions("m", [pred(1)])
    assert err.value.status == 503
    assert slept == []
    assert len(script.requests) == 1


def test_retries_are_bounded_then_the_failure_is_raised() -> None:
    script = Script(*[httpx.ConnectError("refused")] * 10)
    client, slept = make(script, max_retries=3)
    with pytest.raises(CalibrantUnavailableError) as err:
        client.send_outcomes("m", [{"id": "c1", "label": 1, "observed_at": T}])
    assert err.value.attempts == 4
    assert err.value.status is None
    assert len(script.requests) == 4
    assert len(slept) == 3


def test_a_500_is_not_retried() -> None:
    script = Script(httpx.Response(500, json={"title": "Internal error", "detail": "logged", "status": 500}))
    client, _ = make(script)
    with pytest.raises(CalibrantUnavailableError) as err:
        client.send_predictions("m", [pred(1)])
    assert err.value.status == 500
    assert len(script.requests) == 1


def test_a_4xx_raises_with_the_problem_document_and_is_not_retried() -> None:
    problem = {"type": "https://calibrant.invalid/problems/invalid-input", "title": "Invalid input",
               "status": 422, "detail": "1 invalid item; nothing was stored",
               "errors": [{"index": 0, "field": "probability", "message": "must be in [0, 1]"}]}
    script = Script(httpx.Response(422, json=problem, headers={"content-type": "application/problem+json"}))
    client, slept = make(script)
    with pytest.raises(CalibrantRequestError) as err:
        client.send_predictions("m", [pred(1)])
    assert err.value.status == 422
    assert err.value.problem == problem
    assert err.value.errors == problem["errors"]
    assert "probability" in str(err.value)
    assert slept == []
    assert len(script.requests) == 1


def test_batches_are_split_at_the_batch_size_and_counts_summed() -> None:
    script = Script(*[httpx.Response(200, json={"accepted": 2, "duplicates": 1})] * 3)
    client, _ = make(script, batch_size=3)
    totals = client.send_predictions("m", [pred(i) for i in range(7)])
    assert [len(b["predictions"]) for b in script.bodies()] == [3, 3, 1]
    assert totals == {"accepted": 6, "duplicates": 3}
    assert [p["id"] for b in script.bodies() for p in b["predictions"]] == [f"c{i}" for i in range(7)]


def test_a_failing_later_batch_says_how_many_items_were_stored() -> None:
    script = Script(httpx.Response(200, json={"accepted": 2}),
                    httpx.Response(409, json={"title": "Conflict", "detail": "c3 differs", "status": 409}))
    client, _ = make(script, batch_size=2)
    with pytest.raises(CalibrantRequestError) as err:
        client.send_predictions("m", [pred(i) for i in range(4)])
    assert err.value.status == 409
    assert any("starting at item 2" in note for note in err.value.__notes__)


def test_datetimes_are_sent_with_their_offset_and_naive_ones_refused_before_sending() -> None:
    script = Script()
    client, _ = make(script)
    plus_one = datetime(2026, 11, 2, 9, 15, tzinfo=timezone(timedelta(hours=1)))
    client.send_predictions("m", [{"id": "a", "probability": 0.5, "scored_at": plus_one}])
    assert script.bodies()[0]["predictions"][0]["scored_at"] == "2026-11-02T09:15:00+01:00"
    naive = {"id": "b", "probability": 0.5, "scored_at": datetime(2026, 1, 1)}
    with pytest.raises(ValueError, match="naive"):
        client.send_predictions("m", [pred(1), naive])
    assert len(script.requests) == 1  # nothing of the refused call was sent


def test_metrics_sends_the_query_and_is_retried_as_a_read() -> None:
    script = Script(httpx.Response(503), httpx.Response(200, json={"periods": []}))
    client, slept = make(script)
    out = client.metrics("m", T, T + timedelta(days=28), granularity="day", window="7d", version="v2",
                         tag="depot:hill")
    assert out == {"periods": []}
    q = script.requests[-1].url.params
    assert (q["granularity"], q["window"], q["version"], q["tag"]) == ("day", "7d", "v2", "depot:hill")
    assert q["start"] == "2026-11-02T08:15:00+00:00"
    assert len(slept) == 1


def test_a_plain_post_is_not_retried_by_default() -> None:
    script = Script(httpx.Response(503), httpx.Response(200, json={}))
    client, _ = make(script)
    with pytest.raises(CalibrantUnavailableError):
        client.request("POST", "/v1/webhooks", json={"url": "http://127.0.0.1:1/"})
    assert len(script.requests) == 1


def test_retry_after_parsing() -> None:
    assert retry_after_seconds("5", NOW) == 5.0
    assert retry_after_seconds(None, NOW) is None
    assert retry_after_seconds("soon", NOW) is None
    assert retry_after_seconds("Mon, 01 Jan 2001 00:00:00 GMT", NOW) == 0.0  # past dates: no wait
