"""Rule CRUD through the API: defaults, self-description, validation, audit, deletion."""

from __future__ import annotations

import pytest

from tests.conftest import Database, make_client

DEFAULTS = {
    "calibration-chart-upper", "calibration-chart-lower", "excess-log-loss-weekly",
    "calibration-slope-weekly", "score-drift-weekly", "feed-starvation",
}


@pytest.fixture
def api(db: Database):
    with make_client(db) as client:
        assert client.put("/v1/models/m", json={}).status_code == 201
        yield client


def test_defaults_exist_and_describe_themselves(api) -> None:
    body = api.get("/v1/models/m/rules").json()
    assert {r["name"] for r in body["rules"]} == DEFAULTS
    for rule in body["rules"]:
        assert rule["detects"]
        assert rule["minimum_data"]
        assert rule["false_alarms"]["statement"]
    by_name = {r["name"]: r for r in body["rules"]}
    assert by_name["calibration-chart-upper"]["params"]["odds_ratio"] == 2.0
    assert by_name["calibration-chart-lower"]["params"]["odds_ratio"] == 0.5
    assert by_name["calibration-chart-upper"]["false_alarms"]["per_year"] == 1.0
    # Weekly test at level 0.01 on one stream: 0.01 x 52.18 evaluations a year.
    assert by_name["excess-log-loss-weekly"]["false_alarms"]["per_year"] == pytest.approx(0.01 * 365.25 / 7)


def test_create_change_delete_are_validated_and_audited(api, db: Database) -> None:
    rule = {"name": "brier-cap", "kind": "metric_threshold",
            "params": {"metric": "brier", "upper": 0.2, "interval_excludes": 0.15, "min_n": 50}}
    created = api.post("/v1/models/m/rules", json=rule)
    assert created.status_code == 201, created.text
    assert created.json()["false_alarms"]["level"] == 0.05
    assert api.post("/v1/models/m/rules", json=rule).status_code == 409
    bad = api.post("/v1/models/m/rules", json={**rule, "name": "x", "params": {"metric": "nope", "upper": 1}})
    assert bad.status_code == 422
    assert bad.json()["errors"][0]["field"].startswith("params")
    assert api.post("/v1/models/m/rules", json={"name": "y", "kind": "magic"}).status_code == 422
    changed = api.put("/v1/models/m/rules/brier-cap", json={"params": {"upper": 0.3}, "enabled": False})
    assert changed.json()["params"]["upper"] == 0.3
    assert changed.json()["params"]["min_n"] == 50  # merged, not replaced
    assert changed.json()["enabled"] is False
    assert api.put("/v1/models/m/rules/brier-cap", json={"kind": "score_drift"}).status_code == 422
    assert api.delete("/v1/models/m/rules/brier-cap").status_code == 204
    assert api.get("/v1/models/m/rules/brier-cap").status_code == 404
    actions = db.scalar("SELECT count(*) FROM audit_events WHERE action LIKE 'rule.%'")
    assert actions == 3  # created, changed, deleted


def test_a_deleted_default_stays_deleted(api) -> None:
    assert api.delete("/v1/models/m/rules/score-drift-weekly").status_code == 204
    names = {r["name"] for r in api.get("/v1/models/m/rules").json()["rules"]}
    assert names == DEFAULTS - {"score-drift-weekly"}


def test_unknown_model_and_alarm_filters(api) -> None:
    assert api.get("/v1/models/nobody/rules").status_code == 404
    assert api.get("/v1/models/m/alarms", params={"state": "weird"}).status_code == 422
    assert api.get("/v1/models/m/alarms", params={"state": "open"}).json()["alarms"] == []
    assert api.post("/v1/models/m/alarms/12345/resolve", json={}).status_code == 404
