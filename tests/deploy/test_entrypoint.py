"""deploy/entrypoint.sh, the Dockerfile's ENTRYPOINT, run as the container would run it: on an empty
PostgreSQL schema it waits for the database, migrates, and serves a healthy server with two workers."""

from __future__ import annotations

import subprocess
import uuid
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest
import sqlalchemy as sa
from alembic.script import ScriptDirectory
from prometheus_client.openmetrics.parser import text_string_to_metric_families

from calibrant.store import migrate
from calibrant_client import Client
from tests.conftest import postgres_base_url, postgres_unavailable
from tests.deploy.processes import DEPLOY, process_group, tool_env, wait_healthy
from tests.system.server import free_port

ENTRYPOINT = DEPLOY / "entrypoint.sh"


@pytest.fixture
def empty_schema_url() -> Iterator[str]:
    """A schema with no tables at all: the entrypoint has to migrate it."""
    schema = f"calibrant_ep_{uuid.uuid4().hex[:8]}"
    try:
        admin = sa.create_engine(postgres_base_url())
        with admin.begin() as conn:
            conn.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
    except sa.exc.OperationalError as exc:
        postgres_unavailable(str(exc).splitlines()[0])
    base = postgres_base_url()
    yield f"{base}{'&' if '?' in base else '?'}options=-csearch_path%3D{schema}"
    with admin.begin() as conn:
        conn.exec_driver_sql(f'DROP SCHEMA "{schema}" CASCADE')
    admin.dispose()


def test_the_entrypoint_migrates_and_serves_a_healthy_server_on_postgresql(
    empty_schema_url: str, tmp_path: Path
) -> None:
    port = free_port()
    env = tool_env(CALIBRANT_DATABASE_URL=empty_schema_url, CALIBRANT_HOST="127.0.0.1",
                   CALIBRANT_PORT=str(port), CALIBRANT_WORKERS="2", CALIBRANT_LOG_FORMAT="json")
    log = tmp_path / "entrypoint.log"
    base_url = f"http://127.0.0.1:{port}"
    with process_group([str(ENTRYPOINT)], env, log) as process:
        health = wait_healthy(process, base_url, log)
        state = (health["status"], health["database"], health["detail"]["dialect"])
        assert state == ("ok", "ok", "postgresql")
        with Client(base_url) as client:
            sent = client.send_predictions("late-delivery", [
                {"id": "parcel-1", "probability": 0.4, "scored_at": "2026-11-02T08:00:00Z"}])
        assert sent == {"accepted": 1, "duplicates": 0, "expired": 0}
        scraped = httpx.get(f"{base_url}/metrics", timeout=10)
        names = {f.name for f in text_string_to_metric_families(scraped.text)}
        assert "calibrant_predictions_stored" in names
    engine = sa.create_engine(empty_schema_url)
    with engine.connect() as conn:
        stored = conn.exec_driver_sql("SELECT version_num FROM alembic_version").scalar_one()
    engine.dispose()
    assert stored == ScriptDirectory.from_config(migrate.alembic_config()).get_current_head()
    text = log.read_text()
    assert "is up to date" in text  # `calibrant migrate` ran before serve
    assert '"logger": "uvicorn.error"' in text  # --log-format json reached the workers


def test_the_entrypoint_gives_up_on_an_unreachable_database(tmp_path: Path) -> None:
    env = tool_env(CALIBRANT_DATABASE_URL="postgresql+psycopg://postgres@127.0.0.1:1/test",
                   CALIBRANT_DB_WAIT_SECONDS="1", CALIBRANT_PORT=str(free_port()))
    done = subprocess.run([str(ENTRYPOINT)], env=env, capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 1
    assert "still unreachable after 1 s" in done.stderr


def test_other_commands_pass_through_to_calibrant(tmp_path: Path) -> None:
    env = tool_env(CALIBRANT_DATABASE_URL=f"sqlite:///{tmp_path / 'c.db'}")
    done = subprocess.run([str(ENTRYPOINT), "migrate"], env=env, capture_output=True, text=True, timeout=60,
                          check=False)
    assert done.returncode == 0, done.stderr
    assert "is up to date" in done.stdout
