"""calibrant-client as its own distribution: installed into an empty venv it brings httpx and nothing of
the server, and from there it posts a batch to a real ``calibrant serve`` process.

pip installs the client from this checkout (offline); httpx and its dependencies come from the package
index pip is configured with.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import httpx

import calibrant.client
import calibrant.client_buffer
import calibrant_client
from tests.system.server import running_server

CLIENT_PROJECT = Path(__file__).resolve().parents[2] / "clients" / "python"
# Distributions of the server's own stack: none may come with the client.
SERVER_STACK = {
    "calibrant", "fastapi", "starlette", "sqlalchemy", "alembic", "numpy", "scipy", "pandas", "pydantic",
    "pydantic-settings", "uvicorn", "psycopg", "psycopg-binary", "apscheduler", "orjson", "prometheus-client",
}

# Run inside the fresh venv: what is installed, with each distribution's requirements (names only).
INVENTORY = r"""
import json, re
from importlib import metadata
found = {}
for dist in metadata.distributions():
    name = re.sub(r"[-_.]+", "-", dist.metadata["Name"]).lower()
    reqs = []
    for req in dist.requires or []:
        if "extra ==" in req:
            continue  # optional extras are not installed by a plain install
        reqs.append(re.sub(r"[-_.]+", "-", re.split(r"[ ;<>=!~\[(]", req, maxsplit=1)[0]).lower())
    found[name] = reqs
print(json.dumps(found))
"""

SEND = r"""
import json, sys
from datetime import UTC, datetime, timedelta
from calibrant_client import Client
t0 = datetime(2026, 11, 2, tzinfo=UTC)
items = [{"id": f"parcel-{i}", "probability": 0.1 + 0.2 * i, "scored_at": t0 + timedelta(hours=i)}
         for i in range(4)]
with Client(sys.argv[1]) as client:
    print(json.dumps(client.send_predictions("late-delivery", items)))
"""


def _clean_env() -> dict[str, str]:
    # Without PYTHONPATH, so the venv cannot see this checkout's server package.
    return {k: v for k, v in os.environ.items() if k not in {"PYTHONPATH", "VIRTUAL_ENV"}}


def _closure(installed: dict[str, list[str]], root: str) -> set[str]:
    seen: set[str] = set()
    todo = [root]
    while todo:
        name = todo.pop()
        if name in seen or name not in installed:
            continue
        seen.add(name)
        todo.extend(installed[name])
    return seen


def test_the_server_package_reexports_the_light_client() -> None:
    assert calibrant.client.Client is calibrant_client.Client
    assert calibrant.client.CalibrantRequestError is calibrant_client.CalibrantRequestError
    assert calibrant.client_buffer.BatchingSender is calibrant_client.BatchingSender


def test_pip_install_into_an_empty_venv_brings_httpx_only_and_sends_a_batch(
    tmp_path: Path, sqlite_template: Path
) -> None:
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True, env=_clean_env())
    python = venv / "bin" / "python"
    baseline = set(json.loads(subprocess.run(
        [str(python), "-c", INVENTORY], check=True, capture_output=True, text=True, env=_clean_env()
    ).stdout))
    install = subprocess.run(
        [str(python), "-m", "pip", "install", "--quiet", str(CLIENT_PROJECT)],
        capture_output=True, text=True, env=_clean_env(), check=False,
    )
    assert install.returncode == 0, install.stderr[-2000:]

    installed = json.loads(subprocess.run(
        [str(python), "-c", INVENTORY], check=True, capture_output=True, text=True, env=_clean_env()
    ).stdout)
    added = set(installed) - baseline
    assert {"calibrant-client", "httpx"} <= added
    assert installed["calibrant-client"] == ["httpx"]  # its only requirement
    assert not added & SERVER_STACK
    # Everything the install added is the client and what httpx itself requires, nothing more.
    assert added <= {"calibrant-client"} | _closure(installed, "httpx")
    probe = subprocess.run([str(python), "-c", "import calibrant"], capture_output=True, text=True,
                           env=_clean_env(), check=False)
    assert probe.returncode != 0
    assert "No module named 'calibrant'" in probe.stderr

    database = tmp_path / "server.db"
    shutil.copy(sqlite_template, database)
    with running_server(f"sqlite:///{database}", tmp_path / "server.log") as server:
        sent = subprocess.run([str(python), "-c", SEND, server.base_url], capture_output=True, text=True,
                              env=_clean_env(), timeout=60, check=False)
        assert sent.returncode == 0, sent.stderr[-2000:]
        assert json.loads(sent.stdout) == {"accepted": 4, "duplicates": 0, "expired": 0}
        stored = httpx.get(f"{server.base_url}/v1/models/late-delivery", timeout=10).json()
    assert stored["counts"]["predictions"] == 4
