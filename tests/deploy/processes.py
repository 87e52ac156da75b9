"""Start a command in its own process group, wait for /healthz, and stop the whole group afterwards."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import httpx

REPO = Path(__file__).resolve().parents[2]
DEPLOY = REPO / "deploy"
START_DEADLINE_S = 120.0  # a deadline, not a sleep: a busy 2-core host starts two workers slowly


def tool_env(**variables: str) -> dict[str, str]:
    """The environment with the project venv's executables (``calibrant``) first on PATH."""
    venv_bin = str(Path(sys.executable).parent)
    return {**os.environ, "PATH": f"{venv_bin}{os.pathsep}{os.environ.get('PATH', '')}",
            "PYTHON": sys.executable, **variables}


@contextmanager
def process_group(argv: list[str], env: dict[str, str], log_path: Path, cwd: Path | None = None
                  ) -> Iterator[subprocess.Popen[bytes]]:
    """Run ``argv`` as the leader of a new process group; SIGTERM (then SIGKILL) the group at the end."""
    with log_path.open("ab") as log:
        process = subprocess.Popen(argv, env=env, cwd=cwd, stdin=subprocess.DEVNULL, stdout=log,
                                   stderr=subprocess.STDOUT, start_new_session=True)
    try:
        yield process
    finally:
        if process.poll() is None:
            os.killpg(process.pid, signal.SIGTERM)
            try:
                process.wait(timeout=20)
            except subprocess.TimeoutExpired:
                os.killpg(process.pid, signal.SIGKILL)
                process.wait(timeout=10)


def wait_healthy(process: subprocess.Popen[bytes], base_url: str, log_path: Path) -> dict:
    """Poll /healthz until it answers 200 (never a fixed sleep); fail with the log if it does not."""
    deadline = time.monotonic() + START_DEADLINE_S
    last = "no answer yet"
    with httpx.Client(base_url=base_url, timeout=2.0) as client:
        while time.monotonic() < deadline:
            if process.poll() is not None:
                last = f"exited with status {process.returncode}"
                break
            try:
                response = client.get("/healthz")
                if response.status_code == 200:
                    return response.json()
                last = f"/healthz answered {response.status_code}"
            except httpx.TransportError as exc:
                last = type(exc).__name__
            time.sleep(0.1)
    log = log_path.read_text(errors="replace")[-3000:] if log_path.exists() else ""
    raise AssertionError(f"not healthy: {last}\n{log}")
