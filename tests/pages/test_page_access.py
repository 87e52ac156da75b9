"""Who may read the pages, on both databases: open on loopback without keys; with keys, a
sign-in (the key as JSON) gives an HttpOnly, SameSite=Strict cookie whose token is stored
only as a hash, which opens the pages until it expires or its key is revoked, and never
opens the API."""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime, timedelta

import pytest

from calibrant.clock import FixedClock
from calibrant.store.alarm_tables import Alarm
from calibrant.store.engine import make_session_factory
from tests.api.issued_keys import bearer, create_key, run_cli
from tests.api.payloads import assert_problem, post_predictions, prediction
from tests.conftest import Database, make_client

NOW = datetime(2026, 3, 10, 12, 0, tzinfo=UTC)
COOKIE = "calibrant_pages"


def _seed_models(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        for model in ("churn", "fraud"):
            assert post_predictions(client, model, [prediction("a")]).status_code == 200


def test_on_loopback_without_keys_the_pages_open_freely(db: Database) -> None:
    _seed_models(db)
    with make_client(db, clock=FixedClock(NOW)) as client:
        overview = client.get("/")
        assert overview.status_code == 200
        assert "churn" in overview.text
        assert "fraud" in overview.text
        assert "does not replace, validation, local regulation and qualified review" in overview.text
        assert client.get("/models/churn").status_code == 200
        assert "default-src 'none'" in overview.headers["content-security-policy"]
        missing = client.get("/models/nobody")
        assert missing.status_code == 404
        assert "no model" in missing.text.lower() or "nobody" in missing.text


def test_sign_in_sets_a_strict_httponly_cookie_that_opens_pages_but_not_the_api(
        db: Database, monkeypatch, capsys) -> None:
    _seed_models(db)
    token = create_key(db, monkeypatch, capsys, "read")
    clock = FixedClock(NOW)
    with make_client(db, clock=clock, auth="required") as client:
        first = client.get("/models/churn", follow_redirects=False)
        assert first.status_code == 303
        assert first.headers["location"] == "/sign-in?next=%2Fmodels%2Fchurn"
        assert client.get("/sign-in").status_code == 200
        for elsewhere in ("//evil.example/x", "/\\evil.example", "https://evil.example/"):
            form = client.get("/sign-in", params={"next": elsewhere}).text
            assert 'data-next="/"' in form, elsewhere

        signed = client.post("/sign-in", json={"key": token})
        assert signed.status_code == 204, signed.text
        cookie = signed.headers["set-cookie"]
        assert cookie.startswith(f"{COOKIE}=")
        assert "HttpOnly" in cookie
        assert "SameSite=strict" in cookie or "SameSite=Strict" in cookie
        assert "Max-Age=43200" in cookie  # page_session_hours = 12 by default
        value = client.cookies[COOKIE]
        # Only the token's SHA-256 is stored.
        stored = db.scalar("SELECT token_hash FROM page_sessions")
        assert stored == hashlib.sha256(value.encode()).hexdigest()
        assert value not in str(db.scalar("SELECT token_hash || key_id FROM page_sessions"))

        assert client.get("/models/churn").status_code == 200
        assert client.get("/").status_code == 200
        # The cookie is no credential for the API.
        assert_problem(client.get("/v1/models"), 401)
        assert client.get("/v1/models", headers=bearer(token)).status_code == 200

        clock.advance(timedelta(hours=12))  # the session has expired
        assert client.get("/", follow_redirects=False).status_code == 303


def test_sign_in_refuses_what_is_not_a_readers_key_as_json(db: Database, monkeypatch, capsys) -> None:
    ingest = create_key(db, monkeypatch, capsys, "ingest")
    with make_client(db, auth="required") as client:
        assert_problem(client.post("/sign-in", json={"key": "cal_nope_nope"}), 401)
        assert_problem(client.post("/sign-in", json={"key": ingest}), 403)
        wrong_type = client.post("/sign-in", content=f"key={ingest}",
                                 headers={"content-type": "application/x-www-form-urlencoded"})
        assert_problem(wrong_type, 415)
        missing = assert_problem(client.post("/sign-in", json={}), 422)
        assert [e["field"] for e in missing["errors"]] == ["key"]
        broken = client.post("/sign-in", content=b"{", headers={"content-type": "application/json"})
        assert_problem(broken, 422)
    assert db.scalar("SELECT COUNT(*) FROM page_sessions") == 0


def test_revoking_the_key_ends_its_session_and_sign_out_forgets_it(db: Database, monkeypatch, capsys) -> None:
    _seed_models(db)
    token = create_key(db, monkeypatch, capsys, "read")
    key_id = db.scalar("SELECT key_id FROM api_keys")
    with make_client(db, clock=FixedClock(NOW), auth="required") as client:
        assert client.post("/sign-in", json={"key": token}).status_code == 204
        assert client.get("/").status_code == 200
        code, _out, _err = run_cli(db, monkeypatch, capsys, "keys", "revoke", str(key_id))
        assert code == 0
        assert client.get("/", follow_redirects=False).status_code == 303

    admin = create_key(db, monkeypatch, capsys, "admin")
    with make_client(db, clock=FixedClock(NOW), auth="required") as client:
        assert client.post("/sign-in", json={"key": admin}).status_code == 204
        assert client.get("/").status_code == 200
        assert db.scalar("SELECT COUNT(*) FROM page_sessions") == 2  # the revoked key's, and this one
        assert client.post("/sign-out").status_code == 204
        assert db.scalar("SELECT COUNT(*) FROM page_sessions") == 1
        client.cookies.clear()
        assert client.get("/", follow_redirects=False).status_code == 303


@pytest.mark.parametrize("path", ["/models/fraud", "/models/fraud/alarms/1"])
def test_a_key_limited_to_one_model_reads_only_that_model(db: Database, monkeypatch, capsys, path) -> None:
    _seed_models(db)
    token = create_key(db, monkeypatch, capsys, "read", model="churn")
    with make_client(db, clock=FixedClock(NOW), auth="required") as client:
        assert client.post("/sign-in", json={"key": token}).status_code == 204
        overview = client.get("/")
        assert "/models/churn" in overview.text
        assert "/models/fraud" not in overview.text
        assert client.get("/models/churn").status_code == 200
        assert client.get(path).status_code == 403


def test_the_pages_static_files_and_bad_page_input(db: Database) -> None:
    _seed_models(db)
    with make_client(db, clock=FixedClock(NOW)) as client:
        script = client.get("/pages-static/plotly.min.js")
        assert script.status_code == 200
        assert script.headers["content-type"].startswith("text/javascript")
        assert len(script.content) > 1_000_000  # the library's whole bundle, from the installed package
        assert client.get("/pages-static/pages.css").status_code == 200
        assert client.get("/pages-static/../router.py").status_code == 404
        assert client.get("/pages-static/nothing.js").status_code == 404
        bad = client.get("/models/churn", params={"granularity": "year"})
        assert bad.status_code == 422
        assert "granularity" in bad.text
        assert client.get("/models/churn", params={"start": "yesterday"}).status_code == 422


def test_an_alarm_without_a_chart_shows_its_evidence_and_says_there_is_no_path(db: Database) -> None:
    """A window rule's alarm (evidence of a period, no chart path) and a resolved model-wide one."""
    _seed_models(db)
    model_id = int(db.scalar("SELECT id FROM models WHERE name = 'churn'"))
    evidence = {"statistic": 0.61, "interval": [0.55, 0.67], "n": 480, "period_start": "2026-03-02T00:00:00Z",
                "period_end": "2026-03-09T00:00:00Z", "granularity": "week", "detail": {"reference": 0.52}}
    with make_session_factory(db.engine)() as session:
        session.add_all([
            Alarm(model_id=model_id, rule_id=1, rule_name="excess-log-loss-weekly", version="default",
                  segment_key="", segment_value="", state="open", open_key="k1", summary="log-loss above",
                  evidence=evidence, crossed_at=NOW, opened_at=NOW),
            Alarm(model_id=model_id, rule_id=2, rule_name="feed-starvation", version="", segment_key="",
                  segment_value="", state="resolved", open_key=None, summary="feed silent",
                  evidence={"statistic": None, "interval": None, "n": 0}, crossed_at=NOW, opened_at=NOW,
                  resolved_at=NOW + timedelta(hours=1), resolved_by="system", resolution={"reason": "fed"}),
        ])
        session.commit()
    with make_client(db, clock=FixedClock(NOW)) as client:
        window = client.get("/models/churn/alarms/1")
        assert window.status_code == 200, window.text
        assert 'data-testid="no-chart"' in window.text
        assert "0.5500 – 0.6700" in window.text  # the interval, to four places
        assert "period_start" in window.text
        resolved = client.get("/models/churn/alarms/2")
        assert resolved.status_code == 200, resolved.text
        assert "resolved" in resolved.text
        page = client.get("/models/churn")
        assert page.text.count('data-testid="alarm-row"') == 2
        assert client.get("/models/churn/alarms/3").status_code == 404
