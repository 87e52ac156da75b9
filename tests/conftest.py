"""Shared fixtures: one database per dialect, built by the migrations.

Storage tests take the ``db`` fixture, parametrised over SQLite and
PostgreSQL. PostgreSQL comes from CALIBRANT_TEST_POSTGRES_URL (default: the
local server); each test run works in a schema of its own so parallel runs
do not collide. Under CI=true an unreachable PostgreSQL fails the test; on a
developer machine without one it is skipped with a message.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from hypothesis import settings as hypothesis_settings

from calibrant.app import create_app
from calibrant.clock import Clock, FixedClock
from calibrant.config import Settings
from calibrant.store import migrate
from calibrant.store.engine import make_engine
from calibrant.store.schema import Base

DEFAULT_PG_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"
SUITE_REQUEST_SECONDS = 60.0
IN_CI = os.environ.get("CI", "").lower() == "true"

# CI replays the same generated examples every run, so a red build always reproduces;
# local runs keep exploring new examples.
hypothesis_settings.register_profile("ci", derandomize=True, print_blob=True)
if IN_CI:
    hypothesis_settings.load_profile("ci")


def postgres_base_url() -> str:
    return os.environ.get("CALIBRANT_TEST_POSTGRES_URL", DEFAULT_PG_URL)


def postgres_unavailable(reason: str) -> None:
    message = f"PostgreSQL at {postgres_base_url()} is not reachable: {reason}"
    if IN_CI:
        pytest.fail(message + " (CI=true: PostgreSQL tests must run, not skip)")
    pytest.skip(message)


@pytest.fixture(scope="session")
def postgres_schema_url() -> Iterator[str]:
    """A fresh schema on the test server, migrated to head, dropped at the end."""
    base = postgres_base_url()
    schema = f"calibrant_t_{os.getpid()}_{uuid.uuid4().hex[:6]}"
    try:
        admin = sa.create_engine(base)
        with admin.begin() as conn:
            conn.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
    except sa.exc.OperationalError as exc:
        postgres_unavailable(str(exc).splitlines()[0])
    sep = "&" if "?" in base else "?"
    url = f"{base}{sep}options=-csearch_path%3D{schema}"
    engine = make_engine(Settings(database_url=url))
    migrate.upgrade(engine)
    engine.dispose()
    yield url
    with admin.begin() as conn:
        conn.exec_driver_sql(f'DROP SCHEMA "{schema}" CASCADE')
    admin.dispose()


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A migrated SQLite file that each test copies (faster than migrating each time)."""
    path = tmp_path_factory.mktemp("sqlite-template") / "template.db"
    engine = make_engine(Settings(database_url=f"sqlite:///{path}"))
    migrate.upgrade(engine)
    engine.dispose()  # closing the last connection checkpoints the WAL into the file
    return path


@dataclass
class Database:
    """A migrated, empty database of one dialect, for one test."""

    dialect: str
    url: str
    engine: sa.Engine

    def settings(self, **overrides: object) -> Settings:
        # A request's deadline (6 s by default) guards against a stalled database; on a shared CI
        # machine a heavy but healthy test request can take longer, so the suite's apps get 60 s
        # unless a test sets it. The deadline itself is tested in tests/faults with the default.
        overrides.setdefault("request_seconds", SUITE_REQUEST_SECONDS)
        return Settings(database_url=self.url, **overrides)

    def scalar(self, sql: str, **params: object) -> object:
        with self.engine.connect() as conn:
            return conn.execute(sa.text(sql), params).scalar()


def _truncate_all(engine: sa.Engine) -> None:
    names = ", ".join(t.name for t in Base.metadata.sorted_tables)
    with engine.begin() as conn:
        conn.exec_driver_sql(f"TRUNCATE {names} RESTART IDENTITY CASCADE")


def open_database(request: pytest.FixtureRequest, directory: Path) -> Database:
    """A migrated, empty database of the dialect ``request.param``: SQLite copied from the
    session's template into ``directory``, PostgreSQL in this run's schema, emptied."""
    if request.param == "sqlite":
        template: Path = request.getfixturevalue("sqlite_template")
        path = directory / "calibrant.db"
        shutil.copy(template, path)
        url = f"sqlite:///{path}"
    else:
        url = request.getfixturevalue("postgres_schema_url")
    engine = make_engine(Settings(database_url=url))
    if request.param == "postgresql":
        _truncate_all(engine)
    return Database(request.param, url, engine)


@pytest.fixture(params=["sqlite", "postgresql"])
def db(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Database]:
    database = open_database(request, tmp_path)
    yield database
    database.engine.dispose()


# Tests replay streams posted ahead of a FixedClock that they then advance (outcomes before the
# clock reaches them), so under a FixedClock a stored instant may lie up to ten years past it
# unless a test asks for a tolerance. The default of one day is tested in tests/input.
REPLAY_TOLERANCE_HOURS = 24 * 3660


def make_client(db: Database, clock: Clock | None = None, **overrides: object) -> TestClient:
    if isinstance(clock, FixedClock):
        overrides.setdefault("future_tolerance_hours", REPLAY_TOLERANCE_HOURS)
    app = create_app(db.settings(**overrides), engine=db.engine, clock=clock)
    return TestClient(app)


@pytest.fixture
def client(db: Database) -> Iterator[TestClient]:
    with make_client(db) as c:
        yield c
