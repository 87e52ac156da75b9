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


# The default weights (alarms/budget.py): each chart 2, excess log-loss 2, slope, drift, starvation 1.
DEFAULT_WEIGHTS = {
    "calibration-chart-upper": 2, "calibration-chart-lower": 2, "excess-log-loss-weekly": 2,
    "calibration-slope-weekly": 1, "score-drift-weekly": 1, "feed-starvation": 1,
}


def _shares(api) -> dict[str, float]:
    budget = api.get("/v1/models/m/rules").json()["budget"]
    return {r["rule"]: r["share_per_year"] for r in budget["rules"]}


def test_one_budget_is_split_by_weight_and_follows_the_model_setting(api) -> None:
    body = api.get("/v1/models/m/rules").json()
    assert body["budget"]["per_year"] == 1.0
    assert body["budget"]["outside"] == []
    total = sum(DEFAULT_WEIGHTS.values())
    assert _shares(api) == pytest.approx({k: w / total for k, w in DEFAULT_WEIGHTS.items()})
    bases = {r["rule"]: r["basis"] for r in body["budget"]["rules"]}
    assert bases["calibration-chart-upper"] == "markov_design"
    assert bases["excess-log-loss-weekly"] == "per_test_level"
    for rule in body["rules"]:
        assert rule["false_alarms"]["share_per_year"] == pytest.approx(DEFAULT_WEIGHTS[rule["name"]] / total)
    # The model's setting scales every share; the shares always sum to it.
    assert api.put("/v1/models/m", json={"false_alarms_per_year": 2.0}).status_code == 200
    assert sum(_shares(api).values()) == pytest.approx(2.0)
    assert _shares(api)["excess-log-loss-weekly"] == pytest.approx(2.0 * 2 / total)
    assert api.put("/v1/models/m", json={"false_alarms_per_year": 0}).status_code == 422
    # A disabled rule hands its share to the others.
    api.put("/v1/models/m/rules/score-drift-weekly", json={"enabled": False})
    shares = _shares(api)
    assert "score-drift-weekly" not in shares
    assert shares["excess-log-loss-weekly"] == pytest.approx(2.0 * 2 / (total - 1))


def test_a_hand_set_threshold_is_outside_the_budget_and_a_tested_one_inside(api) -> None:
    plain = {"name": "brier-cap", "kind": "metric_threshold", "params": {"metric": "brier", "upper": 0.2}}
    created = api.post("/v1/models/m/rules", json=plain).json()
    assert created["false_alarms"]["share_per_year"] is None
    assert created["false_alarms"]["basis"] is None
    assert api.get("/v1/models/m/rules").json()["budget"]["outside"] == ["brier-cap"]
    tested = {"name": "brier-test", "kind": "metric_threshold",
              "params": {"metric": "brier", "upper": 0.2, "interval_excludes": 0.15}}
    share = api.post("/v1/models/m/rules", json=tested).json()["false_alarms"]["share_per_year"]
    assert share == pytest.approx(1 / (sum(DEFAULT_WEIGHTS.values()) + 1))
    assert sum(_shares(api).values()) == pytest.approx(1.0)


def test_create_change_delete_are_validated_and_audited(api, db: Database) -> None:
    rule = {"name": "brier-cap", "kind": "metric_threshold",
            "params": {"metric": "brier", "upper": 0.2, "interval_excludes": 0.15, "min_n": 50}}
    created = api.post("/v1/models/m/rules", json=rule)
    assert created.status_code == 201, created.text
    assert created.json()["false_alarms"]["basis"] == "per_test_level"
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
