"""``CALIBRANT_PORT=8123 make run`` serves on 8123: the Makefile no longer fixes host and port."""

from __future__ import annotations

import socket
import sys
from pathlib import Path

from tests.deploy.processes import REPO, process_group, tool_env, wait_healthy

PORT = 8123  # the port the promise names


def test_make_run_listens_on_calibrant_port(tmp_path: Path) -> None:
    with socket.socket() as probe:
        assert probe.connect_ex(("127.0.0.1", PORT)) != 0, f"port {PORT} is taken before the test started"
    venv = Path(sys.prefix)
    # The running venv stands in for .venv; -o keeps make from reinstalling it. `make run` migrates
    # var/calibrant.db under the working directory, here a temporary one.
    argv = ["make", "--no-print-directory", "-f", str(REPO / "Makefile"), f"VENV={venv}",
            "-o", str(venv / ".installed"), "run"]
    env = tool_env(CALIBRANT_PORT=str(PORT))
    env.pop("CALIBRANT_HOST", None)
    env.pop("CALIBRANT_DATABASE_URL", None)
    log = tmp_path / "make-run.log"
    with process_group(argv, env, log, cwd=tmp_path) as process:
        health = wait_healthy(process, f"http://127.0.0.1:{PORT}", log)
    assert health["detail"]["dialect"] == "sqlite"
    assert (tmp_path / "var" / "calibrant.db").exists()  # the Makefile's default database, migrated
    assert f"http://127.0.0.1:{PORT}" in log.read_text()  # uvicorn's own line names the address
