"""``Client.refresh``: start or join a refresh job, poll it to its end through a busy server.

Scripted answers (httpx.MockTransport) and an injected sleep and wall clock: nothing waits.
"""

from __future__ import annotations

import httpx
import pytest

from calibrant_client import CalibrantJobError, Client
from tests.client.test_client_retries import Script


def _job(state: str, done: int = 0, errors: list[str] | None = None) -> dict:
    progress = {"phase": "refresh", "round": 1, "buckets_done": done, "buckets_total": 4, "models": []}
    return {"id": "j1", "state": state, "errors": errors or [], "progress": progress}


class Clock:
    """A wall clock that moves only when the client sleeps."""

    def __init__(self) -> None:
        self.now = 1_800_000_000.0
        self.slept: list[float] = []

    def sleep(self, seconds: float) -> None:
        self.slept.append(seconds)
        self.now += seconds


def make(script: Script) -> tuple[Client, Clock]:
    clock = Clock()
    client = Client("http://calibrant.test", transport=httpx.MockTransport(script), sleep=clock.sleep,
                    wall_clock=lambda: clock.now, max_retries=1)
    return client, clock


def test_polls_through_503_until_the_job_ends_and_reports_each_state() -> None:
    busy = httpx.Response(503, headers={"Retry-After": "4"}, json={"title": "busy", "detail": "locked"})
    script = Script(httpx.Response(202, json=_job("running")), httpx.Response(200, json=_job("running", 2)),
                    busy, busy,  # one poll whose retry also met a busy server: polled again later
                    httpx.Response(200, json=_job("succeeded", 4)))
    client, clock = make(script)
    seen: list[int] = []
    job = client.refresh(poll_seconds=1.0, on_progress=lambda j: seen.append(j["progress"]["buckets_done"]))
    assert job["state"] == "succeeded"
    assert seen == [0, 2, 4]
    assert [r.method for r in script.requests] == ["POST", "GET", "GET", "GET", "GET"]
    assert all(r.url.path == "/v1/refresh-jobs/j1" for r in script.requests[1:])
    assert 4.0 in clock.slept  # the server's Retry-After was honoured


def test_a_failed_job_raises_with_its_errors() -> None:
    script = Script(httpx.Response(202, json=_job("running")),
                    httpx.Response(200, json=_job("failed", errors=["database unavailable: stalled"])))
    client, _ = make(script)
    with pytest.raises(CalibrantJobError, match="stalled") as raised:
        client.refresh(poll_seconds=0.5)
    assert raised.value.job["state"] == "failed"


def test_a_job_outliving_the_timeout_raises_and_names_where_to_follow_it() -> None:
    script = Script(httpx.Response(202, json=_job("running")),
                    *[httpx.Response(200, json=_job("running", 1)) for _ in range(20)])
    client, clock = make(script)
    with pytest.raises(CalibrantJobError, match="/v1/refresh-jobs/j1"):
        client.refresh(timeout=5.0, poll_seconds=1.0)
    assert sum(clock.slept) == pytest.approx(5.0)


def test_without_wait_the_started_job_is_returned_at_once() -> None:
    script = Script(httpx.Response(202, json=_job("running")))
    client, clock = make(script)
    assert client.refresh(wait=False)["state"] == "running"
    assert len(script.requests) == 1
    assert clock.slept == []
