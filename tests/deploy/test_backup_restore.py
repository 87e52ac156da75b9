"""deploy/backup.sh and deploy/restore.sh: a seeded database, backed up while it is open and restored
into an empty one, answers every metrics query exactly as the original does (SQLite and PostgreSQL)."""

from __future__ import annotations

import subprocess
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.store import migrate
from calibrant.store.engine import make_engine
from tests.api.test_openmetrics import NOW, WEEK, seed
from tests.conftest import postgres_base_url, postgres_unavailable
from tests.deploy.processes import DEPLOY, tool_env


@dataclass
class Pair:
    """A source database URL and an empty target URL of one dialect."""

    dialect: str
    source: str
    target: str


PASSWORD = "s3cret-for-test"  # the local server trusts every local connection; this only shows masking


def _database_url(base: str, name: str) -> str:
    url = sa.engine.make_url(base).set(database=name, password=PASSWORD)
    return url.render_as_string(hide_password=False)


@pytest.fixture(params=["sqlite", "postgresql"])
def pair(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Pair]:
    if request.param == "sqlite":
        yield Pair("sqlite", f"sqlite:///{tmp_path / 'live.db'}", f"sqlite:///{tmp_path / 'restored.db'}")
        return
    # Whole databases, not schemas: pg_dump and pg_restore work on a database, as in production.
    names = [f"calibrant_bk_{uuid.uuid4().hex[:8]}_{side}" for side in ("live", "restored")]
    try:
        admin = sa.create_engine(postgres_base_url(), isolation_level="AUTOCOMMIT")
        with admin.connect() as conn:
            for name in names:
                conn.exec_driver_sql(f'CREATE DATABASE "{name}"')
    except sa.exc.OperationalError as exc:
        postgres_unavailable(str(exc).splitlines()[0])
    yield Pair("postgresql", *(_database_url(postgres_base_url(), name) for name in names))
    with admin.connect() as conn:
        for name in names:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
    admin.dispose()


def answers(client: TestClient) -> dict[str, object]:
    """Everything a reader sees of the seeded model: metrics per week and segment, alarms, the scrape."""
    query = {"start": WEEK.isoformat(), "end": (WEEK + timedelta(days=14)).isoformat(), "granularity": "week"}
    out: dict[str, object] = {}
    for tag in (None, "depot:harbour", "depot:mill"):
        params = {**query, **({"tag": tag} if tag else {})}
        out[f"metrics {tag}"] = client.get("/v1/models/late-delivery/metrics", params=params).json()
    out["reliability"] = client.get("/v1/models/late-delivery/reliability", params=query).json()
    out["alarms"] = client.get("/v1/models/late-delivery/alarms").json()
    out["model"] = client.get("/v1/models/late-delivery").json()
    out["openmetrics"] = client.get("/metrics").text
    return out


def run_script(name: str, url: str, path: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([str(DEPLOY / name), str(path)], env=tool_env(CALIBRANT_DATABASE_URL=url),
                          capture_output=True, text=True, timeout=120, check=False)


def test_a_restored_backup_answers_exactly_as_the_original(pair: Pair, tmp_path: Path) -> None:
    live = make_engine(Settings(database_url=pair.source))
    migrate.upgrade(live)
    app = create_app(Settings(database_url=pair.source), engine=live, clock=FixedClock(NOW))
    with TestClient(app) as client:
        seed(client)
        before = answers(client)
        # Taken while the live database is open, as a nightly backup would be.
        backup = tmp_path / "calibrant.backup"
        made = run_script("backup.sh", pair.source, backup)
    live.dispose()
    assert made.returncode == 0, made.stderr
    assert "written to" in made.stdout
    assert PASSWORD not in made.stdout + made.stderr
    if pair.dialect == "postgresql":
        assert ":***@" in made.stdout  # the message names the database, with its password masked

    restored = run_script("restore.sh", pair.target, backup)
    assert restored.returncode == 0, restored.stderr
    target = make_engine(Settings(database_url=pair.target))
    app = create_app(Settings(database_url=pair.target), engine=target, clock=FixedClock(NOW))
    with TestClient(app) as c:
        after = answers(c)
    migrate.check(target)  # the restored schema is exactly what the migrations build
    target.dispose()
    assert before["metrics None"]["periods"][0]["n_labeled"] > 0  # the comparison is about real figures
    assert after == before

    again = run_script("restore.sh", pair.target, backup)
    assert again.returncode == 1  # never over a database that holds data
    assert "restore" in again.stderr


def test_the_scripts_refuse_a_missing_url_and_a_wrong_argument_count(tmp_path: Path) -> None:
    env = tool_env()
    env.pop("CALIBRANT_DATABASE_URL", None)
    done = subprocess.run([str(DEPLOY / "backup.sh"), str(tmp_path / "x")], env=env, capture_output=True,
                          text=True, check=False)
    assert done.returncode != 0
    assert "CALIBRANT_DATABASE_URL" in done.stderr
    env = tool_env(CALIBRANT_DATABASE_URL="sqlite:///x.db")
    done = subprocess.run([str(DEPLOY / "restore.sh")], env=env, capture_output=True, text=True, check=False)
    assert done.returncode == 2
    assert "usage" in done.stderr
