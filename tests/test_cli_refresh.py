"""``calibrant refresh``: a refresh job with progress; it joins a running one, never ends in a traceback."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import pytest

from calibrant import cli
from calibrant.store import refresh_job_repo
from tests.conftest import Database, make_client

T0 = datetime(2026, 3, 1, tzinfo=UTC)


def test_refresh_runs_a_job_and_prints_what_each_job_did(
    db: Database, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    with make_client(db) as client:
        items = [{"id": f"c{h}", "probability": 0.3, "scored_at": (T0 + timedelta(hours=h)).isoformat()}
                 for h in range(3)]
        assert client.post("/v1/models/m/predictions", json={"predictions": items}).status_code == 200
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    assert cli.main(["refresh"]) == 0
    out, err = capsys.readouterr()
    assert "started here" in err
    assert "succeeded" in err
    assert "buckets" in err  # the progress bar's unit
    assert "refresh: buckets=3," in out
    assert db.scalar("SELECT COUNT(*) FROM refresh_jobs WHERE state = 'succeeded'") == 1


def test_refresh_joins_a_running_job_and_gives_up_after_its_timeout(
    db: Database, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    now = datetime.now(UTC) + timedelta(hours=1)  # a heartbeat fresh for the whole test
    with db.engine.begin() as conn:
        refresh_job_repo.start_or_join(conn, "elsewhere", worker="other-host:7", requested_by="local",
                                       now=now, stale_before=now - timedelta(minutes=2), progress={})
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    assert cli.main(["refresh", "--timeout", "1", "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "joined: other-host:7 runs it" in err
    assert "still running after 1 s" in err
    assert "Traceback" not in err


def test_an_unreachable_database_is_a_message_not_a_traceback(
    monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    # Port 1 on loopback refuses at once: the command retries until its timeout, then says so.
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", "postgresql+psycopg://postgres@127.0.0.1:1/test")
    assert cli.main(["refresh", "--timeout", "3", "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "did not answer within 3 s" in err
    assert "Traceback" not in err
