"""Does Calibrant work behind PgBouncer in transaction mode? Runs the same traffic through a local
PgBouncer (pool_mode = transaction) with psycopg's server-side prepared statements on and off, and
compares every answer with the same traffic sent straight to PostgreSQL.

Needs ``pgbouncer`` on PATH (Debian: apt-get install pgbouncer) and the local PostgreSQL; not part of
``make bench`` or ``make test``, since neither machine image ships PgBouncer. Prints, per setting,
whether the run succeeded, the first error if not, and whether the metrics equal the direct run's.

    PYTHONPATH=service python -m tests.bench.pooler_transaction_mode
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import tempfile
import time
import uuid
from concurrent.futures import ThreadPoolExecutor
from datetime import timedelta
from pathlib import Path
from typing import Any

import httpx
import sqlalchemy as sa
from tests.api.test_openmetrics import WEEK, traffic
from tests.system.server import running_server

from calibrant.store import migrate

BASE = os.environ.get("CALIBRANT_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/test")
ROUNDS = 12  # batches per kind: well past psycopg's prepare threshold (5 runs of a statement)
CLIENTS = 4  # concurrent posters, so transactions of one client connection meet several server ones


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _start_pgbouncer(workdir: Path, database: str, port: int) -> subprocess.Popen[bytes]:
    (workdir / "pgbouncer.ini").write_text(
        "[databases]\n"
        f"{database} = host=127.0.0.1 port=5432 dbname={database} user=postgres\n"
        "[pgbouncer]\n"
        f"listen_addr = 127.0.0.1\nlisten_port = {port}\nunix_socket_dir =\n"
        "auth_type = any\npool_mode = transaction\n"
        # Few server connections for many client ones, so transactions do move between them.
        "default_pool_size = 2\nmax_client_conn = 100\n"
        f"logfile = {workdir / 'pgbouncer.log'}\n"
    )
    shutil.chown(workdir, "nobody")
    for path in workdir.iterdir():
        shutil.chown(path, "nobody")
    command = ["pgbouncer", str(workdir / "pgbouncer.ini")]
    if os.geteuid() == 0:
        command[1:1] = ["-u", "nobody"]  # PgBouncer refuses to run as root
    with (workdir / "stdout.log").open("wb") as out:
        process = subprocess.Popen(command, stdout=out, stderr=subprocess.STDOUT)
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline:
        with socket.socket() as sock:
            if sock.connect_ex(("127.0.0.1", port)) == 0:
                return process
        time.sleep(0.05)
    process.kill()
    raise RuntimeError("pgbouncer did not start: " + (workdir / "stdout.log").read_text()[-500:])


def _post_all(base_url: str, model: str, predictions: list[dict], outcomes: list[dict]) -> str | None:
    """One client's traffic, in ROUNDS batches a kind, each posted twice (new rows, then the staging
    path of re-posts). Returns the first failure, or None."""
    step = max(len(predictions) // ROUNDS, 1)
    with httpx.Client(base_url=base_url, timeout=60) as client:
        for start in range(0, len(predictions), step):
            for kind, items in (("predictions", predictions), ("outcomes", outcomes)):
                for _ in range(2):
                    answer = client.post(f"/v1/models/{model}/{kind}", json={kind: items[start:start + step]})
                    if answer.status_code != 200:
                        return f"{model} {kind} at {start}: {answer.status_code} {answer.text[:300]}"
    return None


def _run(url: str, prepared: bool, log_path: Path) -> dict[str, Any]:
    """CLIENTS concurrent clients against a real ``calibrant serve``, a refresh, then every answer."""
    predictions, outcomes, *_ = traffic()
    extra = {"CALIBRANT_POSTGRES_PREPARED_STATEMENTS": str(prepared).lower(), "CALIBRANT_DB_POOL_SIZE": "4"}
    with running_server(url, log_path, extra) as server, \
            httpx.Client(base_url=server.base_url, timeout=120) as client:
        models = [f"m{i}" for i in range(CLIENTS)]
        for model in models:
            client.put(f"/v1/models/{model}", json={"segment_keys": ["depot"]}).raise_for_status()
        with ThreadPoolExecutor(CLIENTS) as pool:
            failures = [f for f in pool.map(lambda m: _post_all(server.base_url, m, predictions, outcomes),
                                             models) if f]
        if failures:
            causes = [line for line in log_path.read_text(errors="replace").splitlines()
                      if "psycopg.errors" in line or "prepared statement" in line]
            cause = f" — server log: {causes[0].strip()[:240]}" if causes else ""
            return {"error": failures[0][:60] + cause}
        refreshed = client.post("/v1/refresh?wait=true")
        if refreshed.status_code != 200:
            return {"error": f"refresh: {refreshed.status_code} {refreshed.text[:300]}"}
        query = {"start": WEEK.isoformat(), "end": (WEEK + timedelta(days=14)).isoformat()}
        answers: dict[str, Any] = {}
        for model in models:
            metrics = client.get(f"/v1/models/{model}/metrics", params=query).json()
            metrics.pop("refreshed_at", None)  # wall-clock time of this run's refresh
            answers[model] = metrics["periods"]
        return answers


def main() -> None:
    if shutil.which("pgbouncer") is None:
        raise SystemExit("pgbouncer is not on PATH (apt-get install pgbouncer)")
    admin = sa.create_engine(BASE, isolation_level="AUTOCOMMIT")
    names = {key: f"calibrant_pool_{uuid.uuid4().hex[:6]}_{key}" for key in ("direct", "on", "off")}
    with admin.connect() as conn:
        for name in names.values():
            conn.exec_driver_sql(f'CREATE DATABASE "{name}"')
    workdir = Path(tempfile.mkdtemp(prefix="calibrant-pgbouncer-"))
    workdir.chmod(0o755)  # PgBouncer runs as nobody and must reach its folder
    processes = []
    try:
        results = {}
        for key, name in names.items():
            direct_url = sa.engine.make_url(BASE).set(database=name)
            migrate_engine = sa.create_engine(direct_url)
            migrate.upgrade(migrate_engine)
            migrate_engine.dispose()
            if key == "direct":
                direct = direct_url.render_as_string(hide_password=False)
                results[key] = _run(direct, True, workdir / "direct.log")
                continue
            port = _free_port()
            pool_dir = workdir / key
            pool_dir.mkdir()
            processes.append(_start_pgbouncer(pool_dir, name, port))
            pooled = f"postgresql+psycopg://postgres@127.0.0.1:{port}/{name}"
            results[key] = _run(pooled, key == "on", workdir / f"{key}.log")
        version = subprocess.run(["pgbouncer", "--version"], capture_output=True, text=True, check=True)
        print(f"PgBouncer {version.stdout.split()[1]}, pool_mode = transaction, default_pool_size = 2, "
              f"{CLIENTS} concurrent clients x {ROUNDS} rounds")
        for key, label in (("on", "prepared statements on (default)"), ("off", "prepared statements off")):
            result = results[key]
            if "error" in result:
                print(f"  {label}: FAILED — {result['error']}")
            else:
                print(f"  {label}: ok; answers equal to the direct run: {result == results['direct']}")
    finally:
        for process in processes:
            process.terminate()
            process.wait(timeout=10)
        with admin.connect() as conn:
            for name in names.values():
                conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()
        shutil.rmtree(workdir, ignore_errors=True)


if __name__ == "__main__":
    main()
