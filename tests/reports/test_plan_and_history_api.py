"""The monitoring plan's versions and the settings history through the API, on both databases."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.reports.scenario import MODEL, PLAN, SPAN

T0 = datetime(2026, 3, 2, 8, tzinfo=UTC)


def test_every_plan_version_is_kept_audited_and_readable_at_an_instant(db: Database) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        assert client.put(f"/v1/models/{MODEL}", json={}).status_code == 201
        assert client.get(f"/v1/models/{MODEL}/plan").status_code == 404
        first = client.put(f"/v1/models/{MODEL}/plan", json=PLAN).json()
        clock.advance(timedelta(days=10))
        second = client.put(f"/v1/models/{MODEL}/plan", json={**PLAN, "review_cadence": "quarterly"}).json()
        assert (first["version"], second["version"]) == (1, 2)
        now = client.get(f"/v1/models/{MODEL}/plan").json()
        assert now["version"] == 2
        assert now["review_cadence"] == "quarterly"
        assert now["versions"] == 2
        then = client.get(f"/v1/models/{MODEL}/plan", params={"at": "2026-03-05T00:00:00Z"}).json()
        assert then["version"] == 1
        assert then["review_cadence"] == "monthly"
        assert client.get(f"/v1/models/{MODEL}/plan", params={"version": 1}).json()["recorded_at"] == \
            "2026-03-02T08:00:00Z"
        assert client.get(f"/v1/models/{MODEL}/plan", params={"version": 3}).status_code == 404
        early = client.get(f"/v1/models/{MODEL}/plan", params={"at": "2026-03-01T00:00:00Z"})
        assert early.status_code == 404
    assert db.scalar("SELECT count(*) FROM audit_events WHERE action = 'plan.changed'") == 2


def test_a_bad_plan_is_refused_naming_the_field_and_nothing_is_written(db: Database) -> None:
    with make_client(db, clock=FixedClock(T0)) as client:
        assert client.put(f"/v1/models/{MODEL}", json={}).status_code == 201
        cases = [
            ({**PLAN, "tolerances": [{"metric": "log_loss", "upper": 0.7, "rule": "no-such-rule"}]},
             "tolerances.0.rule"),
            ({**PLAN, "tolerances": [{"metric": "made_up", "upper": 1, "rule": "feed-starvation"}]},
             "tolerances.0.metric"),
            ({**PLAN, "tolerances": [{"metric": "brier", "rule": "feed-starvation"}]}, "tolerances.0"),
            ({**PLAN, "review_cadence": "sometimes"}, "review_cadence"),
            ({k: v for k, v in PLAN.items() if k != "owner"}, "owner"),
            ({**PLAN, "colour": "teal"}, "colour"),
        ]
        for body, field in cases:
            r = client.put(f"/v1/models/{MODEL}/plan", json=body)
            assert r.status_code == 422, (field, r.text)
            assert field in {e["field"] for e in r.json()["errors"]}, (field, r.json())
        assert client.put("/v1/models/unknown-model/plan", json=PLAN).status_code == 404
        assert client.get(f"/v1/models/{MODEL}/plan").status_code == 404  # nothing was written


def test_settings_and_rules_in_force_at_an_instant_with_who_and_when(db: Database) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        assert client.put(f"/v1/models/{MODEL}", json={"outcome_horizon_days": 7}).status_code == 201
        assert client.get(f"/v1/models/{MODEL}/rules").status_code == 200  # the default rules are made
        clock.advance(timedelta(days=2))
        assert client.put(f"/v1/models/{MODEL}", json={"outcome_horizon_days": 14}).status_code == 200
        r = client.put(f"/v1/models/{MODEL}/rules/feed-starvation", json={"enabled": False})
        assert r.status_code == 200, r.text
        clock.advance(timedelta(days=1))

        before = client.get(f"/v1/models/{MODEL}/history", params={"at": "2026-03-03T00:00:00Z"}).json()
        after = client.get(f"/v1/models/{MODEL}/history").json()
    assert before["settings"]["content"]["outcome_horizon_days"] == 7
    assert after["settings"]["content"]["outcome_horizon_days"] == 14
    assert after["settings"]["recorded_at"] == "2026-03-04T08:00:00Z"
    assert after["settings"]["actor"] == "local"
    starvation_then = next(r for r in before["rules"]["content"] if r["name"] == "feed-starvation")
    starvation_now = next(r for r in after["rules"]["content"] if r["name"] == "feed-starvation")
    assert starvation_then["enabled"] is True
    assert starvation_now["enabled"] is False
    assert [v["subject"] for v in after["versions"]].count("settings") >= 2


def test_report_parameters_are_checked_naming_the_field(db: Database) -> None:
    with make_client(db, clock=FixedClock(T0)) as client:
        assert client.put(f"/v1/models/{MODEL}", json={}).status_code == 201
        for params, field in [
            ({"end": SPAN["end"]}, "start"),
            ({**SPAN, "end": SPAN["start"]}, "end"),
            ({**SPAN, "as_of": "2030-01-01T00:00:00Z"}, "as_of"),
            ({**SPAN, "as_of": "yesterday"}, "as_of"),
            ({**SPAN, "format": "docx"}, "format"),
            ({"start": "2020-01-01T00:00:00Z", "end": "2026-01-01T00:00:00Z"}, "end"),
        ]:
            r = client.get(f"/v1/models/{MODEL}/report", params=params)
            assert r.status_code == 422, (params, r.text)
            assert r.json()["errors"][0]["field"] == field
        assert client.get("/v1/models/nobody/report", params=SPAN).status_code == 404
