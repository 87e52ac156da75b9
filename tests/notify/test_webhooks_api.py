"""/v1/webhooks over HTTP: registration and its checks, secret shown once, merge, delete, ping, log."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest
from fastapi.testclient import TestClient

from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.notify.senders import HttpSender
from calibrant.store import keys_repo
from calibrant.store.engine import make_session_factory
from calibrant.store.keys_repo import Scope
from tests.conftest import Database
from tests.notify.receiver import Receiver, verify_standard_webhook

NOW = datetime(2026, 12, 1, 9, 0, tzinfo=UTC)


def fake_dns(host: str, _port: int) -> list[str]:
    table = {"hooks.internal": ["10.1.2.3"], "evil.example.com": ["169.254.169.254"]}
    if host not in table:
        raise OSError("unknown host")
    return table[host]


def client_for(db: Database, *, allow_private: bool, **overrides: object) -> TestClient:
    def resolver(host: str, port: int) -> list[str]:
        return ["127.0.0.1"] if host == "127.0.0.1" else fake_dns(host, port)

    settings = db.settings(webhook_allow_private=allow_private, **overrides)
    app = create_app(
        settings,
        engine=db.engine,
        clock=FixedClock(NOW),
        resolver=resolver,
        webhook_sender=HttpSender(allow_private=allow_private, resolver=resolver),
    )
    return TestClient(app)


@pytest.fixture
def receiver():
    r = Receiver().start()
    yield r
    r.stop()


def test_register_returns_secret_once_and_manages_the_target(db: Database, receiver: Receiver) -> None:
    with client_for(db, allow_private=True) as client:
        created = client.post(
            "/v1/webhooks", json={"url": receiver.url, "description": "on-call", "model": "churn"}
        )
        assert created.status_code == 201, created.text
        body = created.json()
        assert body["secret"].startswith("whsec_")
        assert body["types"] == ["alarm.opened", "alarm.resolved"]
        hook = body["id"]
        shown = client.get(f"/v1/webhooks/{hook}").json()
        assert "secret" not in shown
        assert shown["model"] == "churn"
        assert client.get("/v1/webhooks").json()["count"] == 1

        changed = client.put(f"/v1/webhooks/{hook}", json={"types": ["alarm.resolved"], "model": None})
        assert changed.status_code == 200
        assert changed.json()["types"] == ["alarm.resolved"]
        assert changed.json()["model"] is None
        assert changed.json()["description"] == "on-call"  # absent: unchanged

        assert client.delete(f"/v1/webhooks/{hook}").status_code == 204
        assert client.get(f"/v1/webhooks/{hook}").status_code == 404
        assert client.get(f"/v1/webhooks/{hook}/deliveries").status_code == 404
        assert client.post(f"/v1/webhooks/{hook}/ping").status_code == 404


@pytest.mark.parametrize(
    "url",
    [
        "ftp://127.0.0.1/x",
        "http://169.254.169.254/latest/meta-data/",
        "http://[fe80::1]/",
        "http://100.100.100.200/",
        "http://[fd00:ec2::254]/",
        "http://evil.example.com/hook",
        "http://nowhere.example.com/hook",
    ],
)
def test_refused_targets_are_422_even_with_private_allowed(db: Database, url: str) -> None:
    with client_for(db, allow_private=True) as client:
        response = client.post("/v1/webhooks", json={"url": url})
        assert response.status_code == 422, response.text
        assert response.headers["content-type"] == "application/problem+json"
        assert response.json()["errors"][0]["field"] == "url"
        assert client.get("/v1/webhooks").json()["count"] == 0


@pytest.mark.parametrize("url", ["http://127.0.0.1:8080/hook", "http://10.0.0.5/hook", "http://hooks.internal/"])
def test_private_targets_need_the_setting(db: Database, url: str) -> None:
    with client_for(db, allow_private=False) as client:
        assert client.post("/v1/webhooks", json={"url": url}).status_code == 422
    with client_for(db, allow_private=True) as client:
        assert client.post("/v1/webhooks", json={"url": url}).status_code == 201


def test_bad_body_fields_are_422(db: Database) -> None:
    with client_for(db, allow_private=True) as client:
        for body in (
            {"url": "http://127.0.0.1/x", "types": ["alarm.exploded"]},
            {"url": "http://127.0.0.1/x", "types": []},
            {"url": "http://127.0.0.1/x", "model": "Bad Name"},
            {"url": "http://127.0.0.1/x", "colour": "red"},
        ):
            assert client.post("/v1/webhooks", json=body).status_code == 422, body


def test_ping_is_delivered_signed_and_logged(db: Database, receiver: Receiver) -> None:
    with client_for(db, allow_private=True) as client:
        created = client.post("/v1/webhooks", json={"url": receiver.url}).json()
        ping = client.post(f"/v1/webhooks/{created['id']}/ping")
        assert ping.status_code == 202, ping.text
        delivery = ping.json()
        log = client.get(f"/v1/webhooks/{created['id']}/deliveries").json()
    (got,) = receiver.received
    assert verify_standard_webhook(created["secret"], got.headers, got.body)
    assert got.json["type"] == "ping"
    assert got.headers["webhook-id"] == delivery["webhook_id"]
    assert delivery["state"] == "delivered"
    (attempt,) = delivery["attempts"]
    assert attempt["status_code"] == 200
    assert attempt["error"] is None
    assert attempt["next_attempt_at"] is None
    assert attempt["latency_ms"] > 0
    assert log["count"] == 1
    assert log["deliveries"][0] == delivery


def test_ping_to_a_down_receiver_stays_queued_and_shows_in_health(db: Database, receiver: Receiver) -> None:
    receiver.stop()
    with client_for(db, allow_private=True) as client:
        created = client.post("/v1/webhooks", json={"url": receiver.url}).json()
        delivery = client.post(f"/v1/webhooks/{created['id']}/ping").json()
        health = client.get("/healthz").json()
    assert delivery["state"] == "pending"
    (attempt,) = delivery["attempts"]
    assert attempt["status_code"] is None
    assert "ConnectError" in attempt["error"]
    assert attempt["next_attempt_at"] == delivery["next_attempt_at"] is not None
    assert health["outbox"]["pending"] == 1
    assert health["outbox"]["due"] == 0  # its retry is in the future


def test_webhook_management_needs_an_admin_key(db: Database) -> None:
    sessions = make_session_factory(db.engine)
    with sessions() as session:
        reader = keys_repo.create(session, Scope.READ, NOW).token
        admin = keys_repo.create(session, Scope.ADMIN, NOW).token
        session.commit()
    with client_for(db, allow_private=True, auth="required") as client:
        body = {"url": "http://127.0.0.1:9/x"}
        assert client.post("/v1/webhooks", json=body).status_code == 401
        assert client.get("/v1/webhooks", headers={"authorization": f"Bearer {reader}"}).status_code == 403
        ok = client.post("/v1/webhooks", json=body, headers={"authorization": f"Bearer {admin}"})
        assert ok.status_code == 201
