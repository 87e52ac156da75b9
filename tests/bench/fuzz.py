"""Schema-driven fuzz of every operation in the service's own OpenAPI document; prints the case
count and the number of server errors (5xx) per database.

Cases come from schemathesis (property-based, from /openapi.json): for each operation,
``--cases`` examples that keep to the schema and as many that break it (wrong types, missing
fields, out-of-range values). Each database starts with one model ("0", a name the generator
tries early) holding a little traffic, a rule set and one webhook, so generated paths reach
rows as well as 404s. Requests go through the ASGI app in-process, one at a time, with a
fixed clock, so a run is reproducible from its ``--seed``.

    PYTHONPATH=$PWD/service:$PWD python -m tests.bench.fuzz                 # both databases
    PYTHONPATH=$PWD/service:$PWD python -m tests.bench.fuzz --cases 5 --db sqlite
"""

from __future__ import annotations

import argparse
import contextlib
import logging
import os
import tempfile
import time
import uuid
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

import schemathesis
import sqlalchemy as sa
from fastapi import FastAPI
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, Phase, given, seed, settings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode

from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.config import Settings
from calibrant.store import migrate
from calibrant.store.engine import make_engine

NOW = datetime(2026, 6, 1, tzinfo=UTC)
POSTGRES_URL = os.environ.get(
    "CALIBRANT_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/test"
)
SEEDED_MODEL = "0"


@dataclass
class FuzzReport:
    database: str
    cases: int = 0
    server_errors: int = 0
    statuses: Counter[int] = field(default_factory=Counter)
    failing: dict[str, str] = field(default_factory=dict)  # operation -> first failing request
    seconds: float = 0.0

    def lines(self) -> list[str]:
        shown = ", ".join(f"{status}: {n}" for status, n in sorted(self.statuses.items()))
        out = [
            (f"{self.database}: {self.cases} cases in {self.seconds:.1f} s "
             f"({self.cases / max(self.seconds, 1e-9):.0f}/s), server errors (5xx): {self.server_errors}"),
            f"  statuses: {shown}",
        ]
        out += [f"  5xx at {op}: {example}" for op, example in self.failing.items()]
        return out


def fuzz_settings(url: str) -> Settings:
    # No real deliveries (a ping only logs) and loopback receivers allowed, so a generated
    # webhook can be created and pinged without leaving the process.
    return Settings(database_url=url, webhook_sender="log", webhook_allow_private=True)


def seed_data(client: TestClient) -> None:
    """One model with a day of traffic, half of it labeled, and one webhook."""
    base = NOW - timedelta(days=3)
    predictions = [
        {"id": f"c{i}", "probability": (i % 10 + 0.5) / 10,
         "scored_at": (base + timedelta(minutes=i)).isoformat()}
        for i in range(60)
    ]
    outcomes = [
        {"id": f"c{i}", "label": i % 3 == 0, "observed_at": (base + timedelta(hours=2)).isoformat()}
        for i in range(0, 60, 2)
    ]
    for path, body in (
        (f"/v1/models/{SEEDED_MODEL}/predictions", {"predictions": predictions}),
        (f"/v1/models/{SEEDED_MODEL}/outcomes", {"outcomes": outcomes}),
        ("/v1/webhooks", {"url": "http://127.0.0.1:9/hook"}),
    ):
        response = client.post(path, json=body)
        assert response.status_code < 300, response.text
    assert client.post("/v1/refresh").status_code == 200


def run_campaign(app: FastAPI, database: str, cases_per_mode: int, run_seed: int) -> FuzzReport:
    """``cases_per_mode`` positive and as many negative examples of every operation."""
    report = FuzzReport(database)
    schema = schemathesis.openapi.from_asgi("/openapi.json", app)
    started = time.perf_counter()
    with TestClient(app, raise_server_exceptions=False) as client:
        seed_data(client)
        for result in schema.get_all_operations():
            operation = result.ok()
            for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
                _fuzz_operation(client, operation, mode, cases_per_mode, run_seed, report)
    report.seconds = time.perf_counter() - started
    return report


def _fuzz_operation(client: TestClient, operation: Any, mode: GenerationMode, examples: int,
                    run_seed: int, report: FuzzReport) -> None:
    @seed(run_seed)
    @settings(max_examples=examples, deadline=None, database=None, phases=[Phase.generate],
              suppress_health_check=list(HealthCheck))
    @given(case=operation.as_strategy(mode))
    def one(case: Any) -> None:
        report.cases += 1
        try:
            status = case.call(session=client).status_code
        except Exception as exc:  # an exception escaping the app is a server error too
            status, detail = 599, repr(exc)
        else:
            detail = ""
        report.statuses[status] += 1
        if status >= 500:
            report.server_errors += 1
            report.failing.setdefault(
                operation.label, f"{status} {case.as_curl_command()} {detail}"[:500]
            )

    with contextlib.suppress(Unsatisfiable):  # nothing to break: no parameters and no body
        one()


@contextmanager
def sqlite_database() -> Iterator[str]:
    with tempfile.TemporaryDirectory() as folder:
        yield f"sqlite:///{folder}/fuzz.db"


@contextmanager
def postgres_database() -> Iterator[str]:
    schema = f"calibrant_fuzz_{os.getpid()}_{uuid.uuid4().hex[:6]}"
    admin = sa.create_engine(POSTGRES_URL)
    with admin.begin() as conn:
        conn.exec_driver_sql(f'CREATE SCHEMA "{schema}"')
    sep = "&" if "?" in POSTGRES_URL else "?"
    try:
        yield f"{POSTGRES_URL}{sep}options=-csearch_path%3D{schema}"
    finally:
        with admin.begin() as conn:
            conn.exec_driver_sql(f'DROP SCHEMA "{schema}" CASCADE')
        admin.dispose()


def run(url: str, database: str, cases_per_mode: int, run_seed: int) -> FuzzReport:
    """Migrate a fresh database at ``url`` and fuzz the app on it."""
    engine = make_engine(fuzz_settings(url))
    try:
        migrate.upgrade(engine)
        app = create_app(fuzz_settings(url), engine=engine, clock=FixedClock(NOW))
        return run_campaign(app, database, cases_per_mode, run_seed)
    finally:
        engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=25, help="examples per operation and mode")
    parser.add_argument("--seed", type=int, default=17)
    parser.add_argument("--db", choices=["sqlite", "postgresql", "both"], default="both")
    args = parser.parse_args()
    # Every 5xx is counted here; the app's own log of each would drown the figures.
    logging.getLogger("calibrant.api").setLevel(logging.CRITICAL)
    databases = {"sqlite": sqlite_database, "postgresql": postgres_database}
    chosen = list(databases) if args.db == "both" else [args.db]
    total_errors = 0
    for name in chosen:
        with databases[name]() as url:
            report = run(url, name, args.cases, args.seed)
        print("\n".join(report.lines()), flush=True)
        total_errors += report.server_errors
    raise SystemExit(1 if total_errors else 0)


if __name__ == "__main__":
    main()
