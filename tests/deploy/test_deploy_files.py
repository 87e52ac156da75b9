"""Static checks of the files no container engine runs here: the Dockerfile, the compose file and the
systemd unit start the tested entrypoint, as a non-root user, with a health check."""

from __future__ import annotations

import json
import re
from pathlib import Path

import yaml

from tests.deploy.processes import DEPLOY, REPO


def instructions(dockerfile: Path) -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) pairs, continuation lines joined and comments dropped."""
    logical, current = [], ""
    for line in dockerfile.read_text().splitlines():
        stripped = line.strip()
        if not current and (not stripped or stripped.startswith("#")):
            continue
        if stripped.endswith("\\"):
            current += stripped[:-1] + " "
            continue
        logical.append(current + stripped)
        current = ""
    pairs = [text.split(None, 1) for text in logical]
    return [(parts[0].upper(), parts[1] if len(parts) > 1 else "") for parts in pairs]


def test_the_dockerfile_runs_the_tested_entrypoint_as_a_non_root_user_with_a_health_check() -> None:
    steps = instructions(DEPLOY / "Dockerfile")
    kinds = [kind for kind, _ in steps]
    assert steps[0][0] == "FROM"
    assert re.fullmatch(r"python:3\.11-slim(\S*)?", steps[0][1])  # a slim base
    users = [args for kind, args in steps if kind == "USER"]
    assert users
    assert users[-1] not in {"root", "0", "0:0"}
    # Nothing runs as root after the switch, and the image's process is started after it.
    assert kinds.index("ENTRYPOINT") > len(kinds) - 1 - kinds[::-1].index("USER")
    assert "RUN" not in kinds[len(kinds) - 1 - kinds[::-1].index("USER"):]
    (healthcheck,) = [args for kind, args in steps if kind == "HEALTHCHECK"]
    assert not healthcheck.upper().startswith("NONE")
    assert "/healthz" in healthcheck
    (entrypoint,) = [json.loads(args) for kind, args in steps if kind == "ENTRYPOINT"]
    workdir = [args for kind, args in steps if kind == "WORKDIR"][-1]
    # The entrypoint is deploy/entrypoint.sh, copied from this repository: the script tests/deploy runs.
    assert entrypoint == [f"{workdir}/deploy/entrypoint.sh"]
    assert ("COPY", "deploy/entrypoint.sh deploy/entrypoint.sh") in steps
    assert (DEPLOY / "entrypoint.sh").stat().st_mode & 0o111  # executable, as ENTRYPOINT needs
    # Everything the image copies exists here (the build context is the repository root).
    for kind, args in steps:
        if kind == "COPY":
            for source in args.split()[:-1]:
                assert (REPO / source).exists(), source


def test_the_compose_file_runs_postgresql_and_waits_for_it() -> None:
    compose = yaml.safe_load((DEPLOY / "compose.yaml").read_text())
    services = compose["services"]
    assert services["database"]["image"].startswith("postgres:")
    assert "pg_isready" in services["database"]["healthcheck"]["test"]
    api = services["api"]
    assert api["build"] == {"context": "..", "dockerfile": "deploy/Dockerfile"}
    assert api["depends_on"]["database"]["condition"] == "service_healthy"
    url = api["environment"]["CALIBRANT_DATABASE_URL"]
    assert url.startswith("postgresql+psycopg://")
    assert "@database:5432/" in url
    assert int(api["environment"]["CALIBRANT_WORKERS"]) > 1  # PostgreSQL: several workers are allowed
    jobs = services["jobs"]
    assert jobs["command"] == ["scheduler"]
    assert jobs["environment"]["CALIBRANT_DATABASE_URL"] == url
    assert api["environment"]["CALIBRANT_JOBS_IN_SERVER"] == "false"  # jobs run once, in `jobs`
    for published in api["ports"]:
        assert published.startswith("127.0.0.1:")  # behind a TLS proxy, never open directly


def test_the_systemd_unit_starts_the_entrypoint_as_its_own_user() -> None:
    unit = (DEPLOY / "calibrant.service").read_text()
    lines = [line for line in unit.splitlines() if "=" in line and not line.startswith("#")]
    fields = dict(line.split("=", 1) for line in lines)
    assert fields["ExecStart"].endswith("/deploy/entrypoint.sh serve")
    assert fields["User"] not in {"root", "0"}
    assert fields["Restart"] == "on-failure"
    assert fields["NoNewPrivileges"] == "yes"
