"""GET /v1/audit on both databases: admin scope only; filters by model, actor, action and time;
pages by id, newest first, without gaps or repeats."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from calibrant.clock import FixedClock
from tests.api.issued_keys import bearer, create_key
from tests.api.payloads import assert_problem
from tests.conftest import Database, make_client

START = datetime(2026, 3, 1, 8, 0, tzinfo=UTC)


def _make_history(db: Database, clock: FixedClock) -> None:
    """model.created ×2, then four settings changes an hour apart (churn, fraud, churn, fraud)."""
    with make_client(db, clock=clock) as client:
        for model in ("churn", "fraud"):
            assert client.put(f"/v1/models/{model}", json={}).status_code == 201
        for i in range(4):
            clock.advance(timedelta(hours=1))
            model = ("churn", "fraud")[i % 2]
            assert client.put(f"/v1/models/{model}", json={"description": f"v{i}"}).status_code == 200


def test_filters_select_exactly_the_matching_events(db: Database) -> None:
    clock = FixedClock(START)
    _make_history(db, clock)
    with make_client(db, clock=clock) as client:
        everything = client.get("/v1/audit").json()
        assert everything["count"] == 6
        assert everything["next_before_id"] is None
        ids = [e["id"] for e in everything["events"]]
        assert ids == sorted(ids, reverse=True)
        assert everything["events"][-1] == {
            "id": ids[-1], "at": "2026-03-01T08:00:00Z", "actor": "local", "action": "model.created",
            "target": "churn", "model": "churn", "detail": everything["events"][-1]["detail"]}

        churn = client.get("/v1/audit", params={"model": "churn"}).json()["events"]
        assert [(e["action"], e["model"]) for e in churn] == [
            ("model.settings_changed", "churn"), ("model.settings_changed", "churn"),
            ("model.created", "churn")]
        created = client.get("/v1/audit", params={"action": "model.created"}).json()["events"]
        assert sorted(e["target"] for e in created) == ["churn", "fraud"]
        assert client.get("/v1/audit", params={"actor": "key:nobody"}).json()["count"] == 0
        assert client.get("/v1/audit", params={"actor": "local"}).json()["count"] == 6
        # [09:00, 11:00): the changes at 09:00 and 10:00.
        window = client.get("/v1/audit", params={"start": "2026-03-01T09:00:00Z",
                                                 "end": "2026-03-01T11:00:00Z"}).json()["events"]
        assert [e["at"] for e in window] == ["2026-03-01T10:00:00Z", "2026-03-01T09:00:00Z"]


def test_paging_by_id_covers_every_event_once(db: Database) -> None:
    clock = FixedClock(START)
    _make_history(db, clock)
    with make_client(db, clock=clock) as client:
        seen: list[int] = []
        params: dict = {"limit": 4}
        pages = 0
        while True:
            page = client.get("/v1/audit", params=params).json()
            pages += 1
            seen += [e["id"] for e in page["events"]]
            if page["next_before_id"] is None:
                break
            params = {"limit": 4, "before_id": page["next_before_id"]}
        assert pages == 2
        assert len(seen) == len(set(seen)) == 6
        assert seen == sorted(seen, reverse=True)


def test_bad_filters_name_their_field(db: Database) -> None:
    with make_client(db) as client:
        for params, field in (({"limit": 0}, "limit"), ({"limit": 1001}, "limit"),
                              ({"before_id": 0}, "before_id"),
                              ({"start": "2026-03-01"}, "start"),
                              ({"start": "2026-03-02T00:00:00Z", "end": "2026-03-01T00:00:00Z"}, "end"),
                              ({"limit": "many"}, "limit")):
            body = assert_problem(client.get("/v1/audit", params=params), 422)
            assert [e["field"] for e in body["errors"]] == [field], params
        assert_problem(client.get("/v1/audit", params={"model": "nobody"}), 404)


def test_only_an_admin_key_for_every_model_reads_the_trail(db: Database, monkeypatch, capsys) -> None:
    admin = create_key(db, monkeypatch, capsys, "admin")
    reader = create_key(db, monkeypatch, capsys, "read")
    limited_admin = create_key(db, monkeypatch, capsys, "admin", model="churn")
    with make_client(db, auth="required") as client:
        assert_problem(client.get("/v1/audit"), 401)
        assert_problem(client.get("/v1/audit", headers=bearer(reader)), 403)
        assert_problem(client.get("/v1/audit", headers=bearer(limited_admin)), 403)
        answer = client.get("/v1/audit", headers=bearer(admin))
        assert answer.status_code == 200
        # The key creations were done through the command line: actor "cli".
        assert {e["actor"] for e in answer.json()["events"]} <= {"cli"}
