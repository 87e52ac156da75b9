"""Schema-driven fuzz of every operation in the service's own OpenAPI document; prints the case
count and the number of server errors (5xx) per database.

Cases come from schemathesis (property-based, from /openapi.json): for each operation,
``--cases`` examples that keep to the schema, as many that break it (wrong types, missing
fields, out-of-range values) and, where the path names a model or a webhook, as many that
keep to the schema with the path pointing at the seeded rows. Each database starts with one
model ("0") holding a little traffic, its rules and one webhook. Requests go through the ASGI
app in-process with a fixed clock: one at a time by default, so a run is reproducible from
its ``--seed``; ``--workers N`` sends them from N threads at once (lock contention shows up
there). It also times one metrics request for 100,000 daily periods, which must be refused.

    PYTHONPATH=$PWD/service:$PWD python -m tests.bench.fuzz                 # both databases
    PYTHONPATH=$PWD/service:$PWD python -m tests.bench.fuzz --cases 5 --db sqlite --workers 4
"""

from __future__ import annotations

import argparse
import contextlib
import logging
import os
import tempfile
import threading
import time
import uuid
from collections import Counter
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
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
    long_range_status: int = 0  # a metrics query of 100,000 days: refused, and how fast
    long_range_ms: float = 0.0

    workers: int = 1

    def lines(self) -> list[str]:
        shown = ", ".join(f"{status}: {n}" for status, n in sorted(self.statuses.items()))
        out = [
            (f"{self.database}, {self.workers} worker(s): {self.cases} cases in {self.seconds:.1f} s "
             f"({self.cases / max(self.seconds, 1e-9):.0f}/s), server errors (5xx): {self.server_errors}"),
            f"  statuses: {shown}",
        ]
        out.append(f"  metrics for 100,000 days: {self.long_range_status} in {self.long_range_ms:.1f} ms")
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
    assert client.post("/v1/refresh?wait=true").status_code == 200


def time_long_range(client: TestClient) -> tuple[int, float]:
    """Status and milliseconds of one metrics request for 100,000 daily periods (1900-01-01 on)."""
    started = time.perf_counter()
    response = client.get(f"/v1/models/{SEEDED_MODEL}/metrics", params={
        "start": "1900-01-01T00:00:00Z", "end": "2173-10-16T00:00:00Z", "granularity": "day"})
    return response.status_code, (time.perf_counter() - started) * 1000


# Path parameters pinned to rows that exist, for the pass that goes past the 404s.
EXISTING_ROWS = {"model": SEEDED_MODEL, "webhook_id": 1}


class Caller:
    """Sends each case: in this thread, or (``workers`` > 1) from a pool of threads with a client
    each, so requests overlap the way concurrent production clients make them."""

    def __init__(self, app: FastAPI, workers: int, report: FuzzReport) -> None:
        self.app, self.workers, self.report = app, workers, report
        self.local = threading.local()
        self.lock = threading.Lock()
        self.pool = ThreadPoolExecutor(workers) if workers > 1 else None
        self.pending: list[Future[None]] = []

    def submit(self, label: str, case: Any) -> None:
        if self.pool is None:
            self._call(label, case)
            return
        if len(self.pending) >= 4 * self.workers:  # generate only a little ahead of the senders
            self.pending.pop(0).result()
        self.pending.append(self.pool.submit(self._call, label, case))

    def finish(self) -> None:
        for future in self.pending:
            future.result()
        if self.pool is not None:
            self.pool.shutdown()

    def _client(self) -> TestClient:
        client = getattr(self.local, "client", None)
        if client is None:
            client = self.local.client = TestClient(self.app, raise_server_exceptions=False)
        return client

    def _call(self, label: str, case: Any) -> None:
        try:
            status = case.call(session=self._client()).status_code
        except Exception as exc:  # an exception escaping the app is a server error too
            status, detail = 599, repr(exc)
        else:
            detail = ""
        with self.lock:
            report = self.report
            report.cases += 1
            report.statuses[status] += 1
            if status >= 500:
                report.server_errors += 1
                report.failing.setdefault(label, f"{status} {case.as_curl_command()} {detail}"[:500])


def run_campaign(app: FastAPI, database: str, cases_per_mode: int, run_seed: int,
                 workers: int = 1) -> FuzzReport:
    """``cases_per_mode`` examples of every operation in each of three passes: keeping to the
    schema, keeping to it with the path pointing at existing rows, and breaking it."""
    report = FuzzReport(database, workers=workers)
    schema = schemathesis.openapi.from_asgi("/openapi.json", app)
    started = time.perf_counter()
    with TestClient(app, raise_server_exceptions=False) as client:
        seed_data(client)
        report.long_range_status, report.long_range_ms = time_long_range(client)
        caller = Caller(app, workers, report)
        for result in schema.get_all_operations():
            operation = result.ok()
            names = {p.name for p in operation.path_parameters}
            pinned = {k: v for k, v in EXISTING_ROWS.items() if k in names}
            passes: list[tuple[GenerationMode, dict[str, Any] | None]] = [
                (GenerationMode.POSITIVE, None), (GenerationMode.NEGATIVE, None)]
            if pinned:
                passes.append((GenerationMode.POSITIVE, pinned))
            for mode, path_parameters in passes:
                _fuzz_operation(caller, operation, mode, path_parameters, cases_per_mode, run_seed)
        caller.finish()
    report.seconds = time.perf_counter() - started
    return report


def _fuzz_operation(caller: Caller, operation: Any, mode: GenerationMode,
                    path_parameters: dict[str, Any] | None, examples: int, run_seed: int) -> None:
    @seed(run_seed)
    @settings(max_examples=examples, deadline=None, database=None, phases=[Phase.generate],
              suppress_health_check=list(HealthCheck))
    @given(case=operation.as_strategy(mode, path_parameters=path_parameters))
    def one(case: Any) -> None:
        caller.submit(operation.label, case)

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


def run(url: str, database: str, cases_per_mode: int, run_seed: int, workers: int = 1) -> FuzzReport:
    """Migrate a fresh database at ``url`` and fuzz the app on it."""
    engine = make_engine(fuzz_settings(url))
    try:
        migrate.upgrade(engine)
        app = create_app(fuzz_settings(url), engine=engine, clock=FixedClock(NOW))
        return run_campaign(app, database, cases_per_mode, run_seed, workers)
    finally:
        engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=30, help="examples per operation and mode")
    parser.add_argument("--seed", type=int, default=17)
    parser.add_argument("--db", choices=["sqlite", "postgresql", "both"], default="both")
    parser.add_argument("--workers", type=int, default=1, help="threads sending cases at once")
    args = parser.parse_args()
    # Every 5xx is counted here; the app's own log of each would drown the figures.
    logging.getLogger("calibrant.api").setLevel(logging.CRITICAL)
    databases = {"sqlite": sqlite_database, "postgresql": postgres_database}
    chosen = list(databases) if args.db == "both" else [args.db]
    total_errors = 0
    for name in chosen:
        with databases[name]() as url:
            report = run(url, name, args.cases, args.seed, args.workers)
        print("\n".join(report.lines()), flush=True)
        total_errors += report.server_errors
    raise SystemExit(1 if total_errors else 0)


if __name__ == "__main__":
    main()
