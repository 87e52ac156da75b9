"""Refresh jobs through the API, on both databases: POST answers 202 with a job before the work is
done, a second POST meets the same job, ?wait=true answers with the ended job, GET shows progress by
model, an unknown job is 404, and a job whose runner stopped beating frees the slot after its lease.

The job is held open by a gate job put in front of the real ones (``jobs.JOBS``), so "answers
before the work is done" is shown without a clock: the answer arrives while the gate is shut.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta

import pytest

from calibrant import jobs
from calibrant.clock import FixedClock
from calibrant.store import refresh_job_repo
from tests.api.payloads import assert_problem
from tests.conftest import Database, make_client

NOW = datetime(2026, 3, 10, 12, tzinfo=UTC)
LEASE_S = 30.0


@pytest.fixture
def gate(monkeypatch: pytest.MonkeyPatch) -> Iterator[threading.Event]:
    """A job that waits until the test opens the gate, run before every real job of each round."""
    opened = threading.Event()

    def wait_for_gate(_ctx: jobs.JobContext) -> jobs.JobFigures:
        assert opened.wait(60), "the test never opened the gate"
        return {}

    monkeypatch.setattr(jobs, "JOBS", (jobs.Job("gate", wait_for_gate), *jobs.JOBS))
    yield opened
    opened.set()  # never leave a job thread waiting past the test


def _predictions(hours: int, per_hour: int) -> list[dict]:
    return [{"id": f"c{h}-{i}", "probability": 0.1 + 0.8 * i / per_hour,
             "scored_at": (NOW - timedelta(days=2, hours=h)).isoformat()}
            for h in range(hours) for i in range(per_hour)]


def _ended(runner, job_id: str):
    """The job once it ended (polled; the test has opened every gate)."""
    for _ in range(1200):
        job = runner.get(job_id)
        if job.state != "running":
            return job
        time.sleep(0.05)
    raise AssertionError(f"job {job_id} still running after a minute")


def test_post_answers_202_before_the_work_and_a_second_post_meets_the_same_job(
    db: Database, gate: threading.Event
) -> None:
    with make_client(db, FixedClock(NOW), refresh_job_lease_seconds=LEASE_S) as client:
        first = client.post("/v1/refresh")
        assert first.status_code == 202, first.text
        job = first.json()
        assert job["state"] == "running"
        assert job["finished_at"] is None
        assert job["result"] is None
        assert first.headers["location"] == f"/v1/refresh-jobs/{job['id']}"

        second = client.post("/v1/refresh")
        assert second.status_code == 202
        assert second.json()["id"] == job["id"]

        # wait=true with a timeout that passes while the gate is shut: 202 and the job as it stands
        waited = client.post("/v1/refresh", params={"wait": "true", "timeout": "0.2"})
        assert waited.status_code == 202
        assert waited.json()["id"] == job["id"]
        assert waited.json()["state"] == "running"

        seen = client.get(f"/v1/refresh-jobs/{job['id']}")
        assert seen.status_code == 200
        assert seen.json()["state"] == "running"

        # Open the gate only once this POST has joined the running job: no race with its end.
        runner = client.app.state.runtime.jobs
        plain_start = runner.start

        def start_then_open(requested_by: str):
            joined = plain_start(requested_by)
            gate.set()
            return joined

        runner.start = start_then_open
        ended = client.post("/v1/refresh", params={"wait": "true", "timeout": "60"})
        runner.start = plain_start
        assert ended.status_code == 200, ended.text
        done = ended.json()
        assert done["id"] == job["id"]  # joined the running job, then waited for its end
        assert done["state"] == "succeeded"
        assert done["errors"] == []
        assert done["finished_at"] is not None
        assert done["progress"]["phase"] == "finished"
        assert set(done["result"]["jobs"]) == {"refresh", "alarms", "deliver_webhooks", "retention"}

        after = client.post("/v1/refresh", params={"wait": "true"})
        assert after.status_code == 200
        assert after.json()["id"] != job["id"]  # the last one ended: a new job


def test_progress_counts_each_models_hour_buckets(db: Database) -> None:
    counts = {"alpha": 3, "beta": 5}  # hours of traffic per model, each hour a bucket
    with make_client(db, FixedClock(NOW)) as client:
        for model, hours in counts.items():
            r = client.post(f"/v1/models/{model}/predictions", json={"predictions": _predictions(hours, 4)})
            assert r.status_code == 200, r.text
        r = client.post("/v1/refresh", params={"wait": "true"})
        assert r.status_code == 200, r.text
        job = r.json()
        assert job["state"] == "succeeded"
        progress = job["progress"]
        assert progress["models"] == [
            {"model": m, "buckets_done": n, "buckets_total": n} for m, n in sorted(counts.items())
        ]
        assert progress["buckets_done"] == progress["buckets_total"] == sum(counts.values())
        assert job["result"]["jobs"]["refresh"]["buckets"] == sum(counts.values())
        assert client.get(f"/v1/refresh-jobs/{job['id']}").json() == job


def test_an_unknown_job_is_404(client) -> None:
    body = assert_problem(client.get("/v1/refresh-jobs/no-such-job"), 404)
    assert "no-such-job" in body["detail"]


def test_a_job_whose_runner_stopped_beating_frees_the_slot_after_its_lease(db: Database) -> None:
    clock = FixedClock(NOW)
    with db.engine.begin() as conn:  # a job left running by a process that died
        _, started = refresh_job_repo.start_or_join(
            conn, "deadjob", worker="gone:1", requested_by="local", now=NOW,
            stale_before=NOW - timedelta(seconds=LEASE_S),
            progress={})  # an interrupted runner may leave no progress: still answered in full
    assert started
    with make_client(db, clock, refresh_job_lease_seconds=LEASE_S) as client:
        joined = client.post("/v1/refresh").json()
        assert joined["id"] == "deadjob"  # within its lease: still running
        assert joined["progress"]["phase"] == "starting"
        clock.advance(timedelta(seconds=LEASE_S + 1))
        fresh = client.post("/v1/refresh", params={"wait": "true"})
        assert fresh.status_code == 200, fresh.text
        assert fresh.json()["id"] != "deadjob"
        assert fresh.json()["state"] == "succeeded"
        old = client.get("/v1/refresh-jobs/deadjob").json()
        assert old["state"] == "abandoned"
        assert old["finished_at"] is not None
        assert "gone:1" in old["errors"][0]


def test_simultaneous_starts_meet_one_job(db: Database, gate: threading.Event) -> None:
    """Eight threads start at once: one job, one id for all (the unique running slot)."""
    with make_client(db, FixedClock(NOW)) as client:
        runner = client.app.state.runtime.jobs
        barrier = threading.Barrier(8)
        ids: list[str] = []
        failures: list[BaseException] = []

        def start() -> None:
            try:
                barrier.wait(30)
                ids.append(runner.start("local").id)
            except BaseException as exc:  # reported below, not lost in the thread
                failures.append(exc)

        threads = [threading.Thread(target=start) for _ in range(8)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(60)
        assert failures == []
        assert len(ids) == 8
        assert len(set(ids)) == 1
        gate.set()
        assert _ended(runner, ids[0]).state == "succeeded"
        assert db.scalar("SELECT COUNT(*) FROM refresh_jobs") == 1
