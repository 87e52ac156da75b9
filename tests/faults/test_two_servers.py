"""Two ``calibrant serve`` processes, schedulers on, share one PostgreSQL schema.

Every request below reaches a model neither process has seen before, from both
processes at the same moment: first ingest creates the model, the first rules
listing and the first refresh create its alarm state and default rules. None of
that may answer 5xx, nothing may be created twice, and the rollups the two
processes build together must equal those one in-process server builds from
the same posts.
"""

from __future__ import annotations

import math
import shutil
import threading
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import httpx
import pytest

from calibrant.alarms.kinds import DEFAULT_RULES
from calibrant.config import Settings
from calibrant.store.engine import make_engine
from tests.conftest import Database, make_client
from tests.system.server import running_server

MODELS = [f"first-contact-{i}" for i in range(4)]
CALLERS_PER_SERVER = 5  # per model and round: 10 simultaneous requests on one new model
CASES = 60
REQUEST_TIMEOUT_S = 60.0


def _bodies(model_index: int) -> tuple[dict[str, Any], dict[str, Any]]:
    now = datetime.now(UTC).replace(minute=0, second=0, microsecond=0)
    scored = [now - timedelta(days=3, hours=k % 48) for k in range(CASES)]
    predictions = [
        {"id": f"c{k}", "probability": ((k * 37 + model_index * 11) % 97 + 1) / 99,
         "scored_at": t.isoformat().replace("+00:00", "Z")}
        for k, t in enumerate(scored)
    ]
    outcomes = [
        {"id": f"c{k}", "label": int((k * 13 + model_index) % 3 == 0),
         "observed_at": (now - timedelta(days=1)).isoformat().replace("+00:00", "Z")}
        for k in range(0, CASES, 2)
    ]
    return {"predictions": predictions}, {"outcomes": outcomes}


def _at_once(calls: list[tuple[str, str, str, dict[str, Any] | None]]) -> list[httpx.Response | str]:
    """Send every (base_url, method, path, body) from its own thread, all released together."""
    barrier = threading.Barrier(len(calls))
    replies: list[httpx.Response | str] = [""] * len(calls)

    def send(i: int, base: str, method: str, path: str, body: dict[str, Any] | None) -> None:
        with httpx.Client(base_url=base, timeout=REQUEST_TIMEOUT_S) as client:
            barrier.wait(timeout=REQUEST_TIMEOUT_S)
            try:
                replies[i] = client.request(method, path, json=body)
            except httpx.HTTPError as exc:
                replies[i] = f"{method} {path}: {exc!r}"

    threads = [threading.Thread(target=send, args=(i, *call)) for i, call in enumerate(calls)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=REQUEST_TIMEOUT_S * 2)
    return replies


def _assert_no_5xx(replies: list[httpx.Response | str]) -> None:
    failures = [r if isinstance(r, str) else f"{r.request.method} {r.request.url.path}: {r.status_code} "
                f"{r.text[:200]}" for r in replies if isinstance(r, str) or r.status_code >= 500]
    assert not failures, failures


def _same_numbers(a: Any, b: Any, where: str = "") -> None:
    """Equal structure; numbers equal to 1e-9 relative (the two runs sum in different orders)."""
    if isinstance(a, dict):
        assert isinstance(b, dict), where
        assert a.keys() == b.keys(), where
        for key in a:
            _same_numbers(a[key], b[key], f"{where}.{key}")
    elif isinstance(a, list):
        assert isinstance(b, list), where
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _same_numbers(x, y, f"{where}[{i}]")
    elif isinstance(a, float) and isinstance(b, float):
        assert math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12), (where, a, b)
    else:
        assert a == b, (where, a, b)


# Figures that depend on the moment of reading, not on the rollups: the two runs read seconds apart.
_READ_TIME = {"refreshed_at", "label_completeness"}


def _without_read_time(body: Any) -> Any:
    if isinstance(body, dict):
        return {k: _without_read_time(v) for k, v in body.items() if k not in _READ_TIME}
    if isinstance(body, list):
        return [_without_read_time(v) for v in body]
    return body


@pytest.mark.parametrize("db", ["postgresql"], indirect=True)
def test_two_servers_meet_new_models_at_once(db: Database, tmp_path: Path,
                                             sqlite_template: Path) -> None:
    env = {"CALIBRANT_LOG_LEVEL": "warning", "CALIBRANT_REFRESH_SECONDS": "1"}
    bodies = {m: _bodies(i) for i, m in enumerate(MODELS)}
    today = datetime.now(UTC).replace(hour=0, minute=0, second=0, microsecond=0)
    span = {"granularity": "day", "start": (today - timedelta(days=7)).isoformat(),
            "end": (today + timedelta(days=1)).isoformat()}
    with running_server(db.url, tmp_path / "a.log", env) as a, \
            running_server(db.url, tmp_path / "b.log", env) as b:
        servers = [a.base_url, b.base_url]
        first = [(s, "POST", f"/v1/models/{m}/predictions", bodies[m][0])
                 for m in MODELS for s in servers for _ in range(CALLERS_PER_SERVER)]
        _assert_no_5xx(_at_once(first))
        second = [(s, "GET", f"/v1/models/{m}/rules", None)
                  for m in MODELS for s in servers for _ in range(CALLERS_PER_SERVER)]
        second += [(s, "POST", f"/v1/models/{m}/outcomes", bodies[m][1]) for m in MODELS for s in servers]
        second += [(s, "POST", "/v1/refresh", None) for s in servers]
        _assert_no_5xx(_at_once(second))
        for s in servers:  # one after the other: when the second returns, no work is left anywhere
            assert httpx.post(f"{s}/v1/refresh?wait=true", timeout=REQUEST_TIMEOUT_S).status_code == 200
        together = {m: httpx.get(f"{a.base_url}/v1/models/{m}/metrics", params=span,
                                 timeout=REQUEST_TIMEOUT_S).json() for m in MODELS}

    assert db.scalar("SELECT COUNT(*) FROM models") == len(MODELS)
    assert db.scalar("SELECT COUNT(*) FROM alarm_model_state") == len(MODELS)
    assert db.scalar("SELECT COUNT(*) FROM alarm_rules") == len(MODELS) * len(DEFAULT_RULES)
    assert db.scalar("SELECT COUNT(*) FROM predictions") == len(MODELS) * CASES
    assert db.scalar(
        "SELECT COUNT(*) FROM (SELECT rule_id, version, segment_key, segment_value FROM alarms "
        "WHERE state = 'open' GROUP BY 1, 2, 3, 4 HAVING COUNT(*) > 1) AS twice") == 0

    alone_path = tmp_path / "alone.db"
    shutil.copy(sqlite_template, alone_path)
    alone_url = f"sqlite:///{alone_path}"
    alone = Database("sqlite", alone_url, make_engine(Settings(database_url=alone_url)))
    with make_client(alone) as client:
        for m in MODELS:
            assert client.post(f"/v1/models/{m}/predictions", json=bodies[m][0]).status_code == 200
            assert client.post(f"/v1/models/{m}/outcomes", json=bodies[m][1]).status_code == 200
        assert client.post("/v1/refresh?wait=true").status_code == 200
        for m in MODELS:
            single = client.get(f"/v1/models/{m}/metrics", params=span).json()
            assert single.get("periods"), (m, single)
            _same_numbers(_without_read_time(together[m]), _without_read_time(single), m)
    alone.engine.dispose()
