"""``calibrant serve --workers N`` and ``--log-format json``; the log lines of an alarm opening and
resolving."""

from __future__ import annotations

import json
import logging
from datetime import UTC, datetime, timedelta

import pytest
import uvicorn

from calibrant import cli
from calibrant.clock import FixedClock
from calibrant.logs import JsonFormatter, log_config
from calibrant.store.engine import make_session_factory
from calibrant.store.unit import after_commit
from tests.conftest import Database, make_client
from tests.test_cli_serve import ServeRecorder

WEEK = datetime(2026, 11, 2, tzinfo=UTC)


def test_more_than_one_worker_on_sqlite_is_refused_with_the_reason(tmp_path, monkeypatch) -> None:
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", f"sqlite:///{tmp_path / 'c.db'}")
    monkeypatch.setattr(uvicorn, "run", ServeRecorder())
    with pytest.raises(SystemExit) as exited:
        cli.main(["serve", "--workers", "2"])
    message = str(exited.value.code)
    assert "CALIBRANT_WORKERS" in message
    assert "SQLite" in message
    assert "PostgreSQL" in message


def test_workers_on_postgresql_start_uvicorn_with_a_factory_per_process(
    postgres_schema_url: str, monkeypatch
) -> None:
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", postgres_schema_url)
    monkeypatch.setenv("CALIBRANT_PORT", "8124")
    # cmd_serve writes these for its workers; set here, monkeypatch restores them after the test.
    for name, value in (("CALIBRANT_HOST", "127.0.0.1"), ("CALIBRANT_WORKERS", "1"),
                        ("CALIBRANT_LOG_FORMAT", "text"), ("CALIBRANT_JOBS_IN_SERVER", "true")):
        monkeypatch.setenv(name, value)
    recorder = ServeRecorder()
    calls: list[object] = []
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: (calls.append(app), recorder(app, **kw)))
    assert cli.main(["serve", "--workers", "3", "--no-scheduler", "--log-format", "json"]) == 0
    (kwargs,) = recorder.calls
    assert calls == ["calibrant.cli:worker_app"]
    assert (kwargs["factory"], kwargs["workers"], kwargs["port"]) == (True, 3, 8124)
    assert kwargs["timeout_worker_healthcheck"] == cli.WORKER_HEALTHCHECK_SECONDS
    assert kwargs["log_config"]["formatters"]["default"]["()"] is JsonFormatter
    # Each worker builds its app from the environment, which now says what the command line said.
    app = cli.worker_app()
    runtime = app.state.runtime
    chosen = runtime.settings
    assert (chosen.workers, chosen.port, chosen.jobs_in_server) == (3, 8124, False)
    runtime.engine.dispose()


def test_one_worker_serves_the_app_object_with_the_chosen_log_format(db: Database, monkeypatch) -> None:
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    monkeypatch.setenv("CALIBRANT_LOG_FORMAT", "json")
    recorder = ServeRecorder()
    monkeypatch.setattr(uvicorn, "run", recorder)
    assert cli.main(["serve"]) == 0
    (kwargs,) = recorder.calls
    assert "workers" not in kwargs
    assert kwargs["log_config"]["loggers"]["calibrant"]["handlers"] == ["calibrant"]
    assert kwargs["log_config"]["formatters"]["calibrant"]["()"] is JsonFormatter


def test_json_lines_carry_the_extra_fields() -> None:
    record = logging.LogRecord("calibrant.alarms", logging.INFO, __file__, 1, "alarm.opened model=m", None,
                               None)
    record.__dict__.update({"model": "m", "alarm_id": 7, "statistic": 2.5})
    line = json.loads(JsonFormatter().format(record))
    assert line["message"] == "alarm.opened model=m"
    assert (line["model"], line["alarm_id"], line["statistic"], line["level"]) == ("m", 7, 2.5, "info")
    assert line["time"].endswith("Z")
    with pytest.raises(ValueError, match="log format"):
        log_config("info", "xml")


def test_after_commit_runs_on_commit_only(db: Database) -> None:
    ran: list[str] = []
    sessions = make_session_factory(db.engine)
    with sessions() as session:
        session.connection()  # a transaction is open, as in a unit of work
        after_commit(session, lambda: ran.append("rolled back"))
        session.rollback()
        after_commit(session, lambda: ran.append("committed"))
        session.commit()
        session.commit()  # a second commit does not repeat the first one's callbacks
    assert ran == ["committed"]


def test_an_alarm_opening_and_resolving_each_write_one_structured_line(db: Database, caplog) -> None:
    # One prediction, then silence for 12 days: the default feed-starvation rule opens an alarm.
    clock = FixedClock(WEEK)
    caplog.set_level(logging.INFO, logger="calibrant.alarms")
    with make_client(db, clock=clock) as client:
        item = {"id": "p1", "probability": 0.3, "scored_at": WEEK.isoformat()}
        assert client.post("/v1/models/m/predictions", json={"predictions": [item]}).status_code == 200
        clock.advance(timedelta(days=12))
        assert client.post("/v1/refresh?wait=true").status_code == 200
        (alarm,) = client.get("/v1/models/m/alarms", params={"state": "open"}).json()["alarms"]
        opened = [r for r in caplog.records if getattr(r, "event", None) == "alarm.opened"]
        assert len(opened) == 1
        assert client.post(f"/v1/models/m/alarms/{alarm['id']}/resolve", json={}).status_code == 200
    resolved = [r for r in caplog.records if getattr(r, "event", None) == "alarm.resolved"]
    assert len(resolved) == 1
    for record in (opened[0], resolved[0]):
        assert (record.model, record.rule, record.alarm_id) == ("m", alarm["rule"], alarm["id"])
        assert record.stream == "all_versions/all"
        assert isinstance(record.statistic, float)
        assert f"alarm_id={alarm['id']}" in record.getMessage()


def test_wait_returns_once_the_database_answers(db: Database, monkeypatch, capsys) -> None:
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", db.url)
    assert cli.main(["wait", "--timeout", "5"]) == 0
    assert "answers" in capsys.readouterr().out


def test_wait_gives_up_after_its_timeout(monkeypatch, capsys) -> None:
    monkeypatch.setenv("CALIBRANT_DATABASE_URL", "postgresql+psycopg://postgres@127.0.0.1:1/test")
    assert cli.main(["wait", "--timeout", "0", "--interval", "0"]) == 1
    assert "still unreachable after 0 s" in capsys.readouterr().err
