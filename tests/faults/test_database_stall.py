"""A real server whose PostgreSQL sits behind a proxy that stalls and drops its connections.

While the database is stalled every route answers within 10 s, and each one
that needs the database answers 503 with Retry-After (never 500, never a hang);
/healthz names the failed check. When the proxy forwards again the same
process answers 2xx without a restart, and everything acknowledged before is
still stored. Default settings throughout: the 10 s is the shipped deadline's.
"""

from __future__ import annotations

import threading
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import httpx
import pytest
from sqlalchemy.engine import make_url

from tests.conftest import Database
from tests.faults.proxy import running_proxy
from tests.system.server import running_server

ANSWER_WITHIN_S = 10.0
RECOVER_WITHIN_S = 20.0
MODEL = "stall-watch"
Call = tuple[str, str, dict[str, Any] | None]  # method, path, JSON body


def _batch(prefix: str, n: int = 20) -> dict[str, Any]:
    at = (datetime.now(UTC) - timedelta(days=2)).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    return {"predictions": [{"id": f"{prefix}-{k}", "probability": (k + 1) / (n + 2), "scored_at": at}
                            for k in range(n)]}


def _requests(openapi: dict[str, Any]) -> list[Call]:
    """Every GET of the OpenAPI document with its path filled in, plus the two ingest POSTs."""
    fill = {"{model}": MODEL, "{rule}": "calibration-chart-upper", "{alarm_id}": "1", "{webhook_id}": "1"}
    calls: list[Call] = []
    for template, operations in openapi["paths"].items():
        if "get" not in operations:
            continue
        path = template
        for placeholder, value in fill.items():
            path = path.replace(placeholder, value)
        calls.append(("GET", path, None))
    calls.append(("POST", f"/v1/models/{MODEL}/predictions", _batch("during-stall")))
    calls.append(("POST", f"/v1/models/{MODEL}/outcomes",
                  {"outcomes": [{"id": "first-0", "label": 1, "observed_at": "2026-03-01T00:00:00Z"}]}))
    return calls


def _all_at_once(base: str, calls: list[Call]) -> list[tuple[str, Any, float]]:
    """(what, response or error, seconds taken) for each call, all sent together."""
    out: list[tuple[str, Any, float]] = [("", None, 0.0)] * len(calls)

    def send(i: int, method: str, path: str, body: dict[str, Any] | None) -> None:
        began = time.monotonic()
        try:
            with httpx.Client(base_url=base, timeout=ANSWER_WITHIN_S * 3) as client:
                reply: Any = client.request(method, path, json=body)
        except httpx.HTTPError as exc:
            reply = exc
        out[i] = (f"{method} {path}", reply, time.monotonic() - began)

    threads = [threading.Thread(target=send, args=(i, *call)) for i, call in enumerate(calls)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return out


@pytest.mark.parametrize("db", ["postgresql"], indirect=True)
def test_stalled_database_answers_503_and_recovers_without_restart(db: Database, tmp_path: Path) -> None:
    real = make_url(db.url)
    with running_proxy(real.host or "127.0.0.1", real.port or 5432) as proxy:
        via_proxy = real.set(port=proxy.port).render_as_string(hide_password=False)
        with running_server(via_proxy, tmp_path / "server.log", {"CALIBRANT_LOG_LEVEL": "warning"}) as srv:
            base = srv.base_url
            ingest = f"{base}/v1/models/{MODEL}/predictions"
            acknowledged = httpx.post(ingest, json=_batch("first"), timeout=30)
            assert acknowledged.status_code == 200, acknowledged.text
            calls = _requests(httpx.get(f"{base}/openapi.json", timeout=30).json())

            proxy.stall()
            results = _all_at_once(base, calls)
            print(f"stalled: {len(results)} requests, slowest answer {max(t for *_x, t in results):.2f} s")
            slow = [(what, round(took, 1)) for what, _r, took in results if took > ANSWER_WITHIN_S]
            assert not slow, slow
            errors = [(what, repr(r)) for what, r, _t in results if not isinstance(r, httpx.Response)]
            assert not errors, errors
            wrong = [(what, r.status_code, r.text[:160]) for what, r, _t in results
                     if r.status_code >= 500 and (r.status_code != 503 or "Retry-After" not in r.headers)]
            assert not wrong, wrong
            answered_503 = {what for what, r, _t in results if r.status_code == 503}
            for needs_database in ("GET /healthz", "GET /v1/models", f"GET /v1/models/{MODEL}",
                                   f"POST /v1/models/{MODEL}/predictions"):
                assert needs_database in answered_503, (needs_database, results)
            health = next(r for what, r, _t in results if what == "GET /healthz").json()
            assert health["failed"] == ["database"]

            proxy.drop()  # the stalled connections die; new ones are forwarded again
            proxy.resume()
            deadline = time.monotonic() + RECOVER_WITHIN_S
            status = 0
            while time.monotonic() < deadline and status != 200:
                status = httpx.get(f"{base}/healthz", timeout=ANSWER_WITHIN_S).status_code
            assert status == 200, srv.log_tail()
            after = httpx.post(ingest, json=_batch("after"), timeout=30)
            assert after.status_code == 200, after.text

            proxy.drop()  # a dropped connection in the pool is noticed by the pre-ping: no error at all
            again = httpx.get(f"{base}/v1/models/{MODEL}", timeout=30)
            assert again.status_code == 200, again.text

    with db.engine.connect() as conn:
        stored = {row for (row,) in conn.exec_driver_sql("SELECT case_id FROM predictions")}
    assert {f"first-{k}" for k in range(20)} <= stored  # acknowledged before the stall
    assert {f"after-{k}" for k in range(20)} <= stored  # acknowledged after it
