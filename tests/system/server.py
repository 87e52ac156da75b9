"""Run the real ``calibrant serve`` as a subprocess on 127.0.0.1 for system tests and benchmarks.

The server is started exactly as ``make run`` starts it (the installed
``calibrant`` command, one uvicorn process), only on a free port and against
the database URL given. Readiness is decided by polling ``/healthz`` until a
deadline, never by a fixed sleep.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import httpx

HOST = "127.0.0.1"
START_DEADLINE_S = 30.0
STOP_DEADLINE_S = 10.0
POLL_INTERVAL_S = 0.05
PORT_ATTEMPTS = 3  # a port picked free can be taken before the server binds it


def calibrant_command() -> Path:
    """The ``calibrant`` entry point next to the running interpreter (the project venv)."""
    candidate = Path(sys.executable).parent / "calibrant"
    if not candidate.exists():
        raise RuntimeError(f"{candidate} not found: run the tests with the project venv's python")
    return candidate


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((HOST, 0))
        return int(sock.getsockname()[1])


class ServerProcess:
    """One ``calibrant serve`` subprocess; its output goes to ``log_path``."""

    def __init__(self, database_url: str, log_path: Path, extra_env: dict[str, str] | None = None):
        self.database_url = database_url
        self.log_path = log_path
        self.extra_env = extra_env or {}
        self.port: int | None = None
        self.process: subprocess.Popen[bytes] | None = None

    @property
    def base_url(self) -> str:
        if self.port is None:
            raise RuntimeError("the server has not been started")
        return f"http://{HOST}:{self.port}"

    def start(self, deadline_s: float = START_DEADLINE_S) -> None:
        if self.process is not None and self.process.poll() is None:
            raise RuntimeError("the server is already running")
        last_error = ""
        for _ in range(PORT_ATTEMPTS):
            self._spawn(free_port())
            last_error = self._wait_healthy(deadline_s)
            if not last_error:
                return
            self.kill()
        raise RuntimeError(f"calibrant serve did not become healthy: {last_error}\n{self.log_tail()}")

    def _spawn(self, port: int) -> None:
        env = {**os.environ, **self.extra_env, "CALIBRANT_DATABASE_URL": self.database_url}
        self.port = port
        with self.log_path.open("ab") as log:
            self.process = subprocess.Popen(
                [str(calibrant_command()), "serve", "--host", HOST, "--port", str(port)],
                env=env,
                stdin=subprocess.DEVNULL,
                stdout=log,
                stderr=subprocess.STDOUT,
            )

    def _wait_healthy(self, deadline_s: float) -> str:
        """Poll /healthz until it answers 200; return "" on success or why it did not."""
        assert self.process is not None
        deadline = time.monotonic() + deadline_s
        last = "no answer yet"
        with httpx.Client(base_url=self.base_url, timeout=2.0) as client:
            while time.monotonic() < deadline:
                if self.process.poll() is not None:
                    return f"exited with status {self.process.returncode}"
                try:
                    response = client.get("/healthz")
                    if response.status_code == 200:
                        return ""
                    last = f"/healthz answered {response.status_code}"
                except httpx.TransportError as exc:
                    last = type(exc).__name__
                time.sleep(POLL_INTERVAL_S)
        return f"not healthy after {deadline_s:.0f} s ({last})"

    def kill(self) -> None:
        """SIGKILL: no shutdown handlers run, open transactions are cut off mid-way."""
        if self.process is None:
            return
        if self.process.poll() is None:
            self.process.send_signal(signal.SIGKILL)
        self.process.wait(timeout=STOP_DEADLINE_S)

    def stop(self) -> None:
        """SIGTERM and wait for a graceful exit; SIGKILL if it does not come in time."""
        if self.process is None or self.process.poll() is not None:
            return
        self.process.send_signal(signal.SIGTERM)
        try:
            self.process.wait(timeout=STOP_DEADLINE_S)
        except subprocess.TimeoutExpired:
            self.kill()

    def log_tail(self, lines: int = 30) -> str:
        if not self.log_path.exists():
            return ""
        return "\n".join(self.log_path.read_text(errors="replace").splitlines()[-lines:])


@contextmanager
def running_server(
    database_url: str, log_path: Path, extra_env: dict[str, str] | None = None
) -> Iterator[ServerProcess]:
    """A started server that is stopped (or killed) when the block ends, whatever happens."""
    server = ServerProcess(database_url, log_path, extra_env)
    server.start()
    try:
        yield server
    finally:
        server.stop()
