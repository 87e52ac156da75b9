"""Start ``calibrant serve`` for the demo: a fresh SQLite file, a free 127.0.0.1 port, ready at /healthz."""

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
READY_DEADLINE_S = 120.0  # a server importing numpy and scipy on a busy machine took over 30 s


class DemoServiceError(RuntimeError):
    """The demo's server could not be prepared or started; the message says where to look."""


def _calibrant() -> str:
    return str(Path(sys.executable).parent / "calibrant")


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind((HOST, 0))
        return int(sock.getsockname()[1])


def _wait_ready(url: str, process: subprocess.Popen[bytes], log: Path) -> None:
    deadline = time.monotonic() + READY_DEADLINE_S
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise DemoServiceError(f"calibrant serve exited ({process.returncode}); see {log}")
        try:
            if httpx.get(f"{url}/healthz", timeout=2.0).status_code == 200:
                return
        except httpx.TransportError:
            pass
        time.sleep(0.1)
    raise DemoServiceError(f"calibrant serve not ready after {READY_DEADLINE_S:.0f} s; see {log}")


@contextmanager
def demo_service(workdir: Path) -> Iterator[str]:
    """Yields the base URL; the server is stopped when the block ends."""
    workdir.mkdir(parents=True, exist_ok=True)
    db = workdir / "calibrant.db"
    for stale in workdir.glob("calibrant.db*"):  # a fresh file every run
        stale.unlink()
    log = workdir / "server.log"
    env = {
        **os.environ,
        "CALIBRANT_DATABASE_URL": f"sqlite:///{db}",
        "CALIBRANT_WEBHOOK_ALLOW_PRIVATE": "true",  # the receiver is on 127.0.0.1
        # The demo runs the jobs itself once all history is posted: a scheduled round in the
        # middle of posting would see cases whose outcomes are not posted yet as on time.
        "CALIBRANT_REFRESH_SECONDS": "86400",
        "CALIBRANT_SQLITE_SYNCHRONOUS": "NORMAL",  # a throwaway file: speed over power-loss safety
        "CALIBRANT_LOG_LEVEL": "warning",
    }
    migrated = subprocess.run([_calibrant(), "migrate"], env=env, capture_output=True, check=False)  # noqa: S603
    if migrated.returncode != 0:
        raise DemoServiceError(f"calibrant migrate failed: {migrated.stderr.decode(errors='replace')[-500:]}")
    port = _free_port()
    url = f"http://{HOST}:{port}"
    with log.open("wb") as out:
        process = subprocess.Popen(  # noqa: S603
            [_calibrant(), "serve", "--host", HOST, "--port", str(port)],
            env=env, stdin=subprocess.DEVNULL, stdout=out, stderr=subprocess.STDOUT)
    try:
        _wait_ready(url, process, log)
        yield url
    finally:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(timeout=10)
