"""GET /metrics: OpenMetrics text that prometheus_client's own parser reads, carrying the metrics API's
figures for the latest complete period, per model and segment, and the service's health."""

from __future__ import annotations

from collections import Counter
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from fastapi.testclient import TestClient
from prometheus_client.openmetrics.parser import text_string_to_metric_families
from sklearn.metrics import brier_score_loss, log_loss

from calibrant.clock import FixedClock
from tests.api.issued_keys import bearer, create_key
from tests.conftest import Database, make_client

WEEK = datetime(2026, 11, 2, tzinfo=UTC)  # a Monday: the week [WEEK, WEEK + 7 d) is the one reported
NOW = WEEK + timedelta(days=9, hours=5)  # inside the next week, so WEEK's is the latest complete one
N = 90
OPENMETRICS = "application/openmetrics-text"


def traffic(seed: int = 7) -> tuple[list[dict], list[dict], np.ndarray, np.ndarray, list[str]]:
    rng = np.random.default_rng(seed)
    p = rng.uniform(0.05, 0.95, N)
    y = (rng.uniform(size=N) < p).astype(int)
    depots = [("harbour", "hill", "mill")[i % 3] for i in range(N)]
    predictions = [{"id": f"parcel-{i}", "probability": float(p[i]),
                    "scored_at": (WEEK + timedelta(hours=i)).isoformat(), "tags": {"depot": depots[i]}}
                   for i in range(N)]
    observed = (WEEK + timedelta(days=6)).isoformat()
    outcomes = [{"id": f"parcel-{i}", "label": int(y[i]), "observed_at": observed} for i in range(N)]
    return predictions, outcomes, p, y, depots


def seed(client: TestClient, model: str = "late-delivery") -> tuple[np.ndarray, np.ndarray, list[str]]:
    predictions, outcomes, p, y, depots = traffic()
    assert client.put(f"/v1/models/{model}", json={"segment_keys": ["depot"]}).status_code == 201
    posted = client.post(f"/v1/models/{model}/predictions", json={"predictions": predictions})
    assert posted.status_code == 200
    assert client.post(f"/v1/models/{model}/outcomes", json={"outcomes": outcomes}).status_code == 200
    assert client.post("/v1/refresh?wait=true").status_code == 200
    return p, y, depots


def scrape(client: TestClient, **headers: str) -> dict[str, dict[tuple, float]]:
    """Parse with the exposition library's parser: {sample name: {sorted label items: value}}."""
    response = client.get("/metrics", headers=headers)
    assert response.status_code == 200, response.text
    assert response.headers["content-type"].startswith(OPENMETRICS)
    samples: dict[str, dict[tuple, float]] = {}
    for family in text_string_to_metric_families(response.text):
        for sample in family.samples:
            samples.setdefault(sample.name, {})[tuple(sorted(sample.labels.items()))] = sample.value
    return samples


def seg(model: str, key: str = "", value: str = "") -> tuple:
    return tuple(sorted({"model": model, "segment_key": key, "segment_value": value}.items()))


def api_week(client: TestClient, model: str, tag: str | None = None) -> dict:
    params = {"start": WEEK.isoformat(), "end": (WEEK + timedelta(days=7)).isoformat(), "granularity": "week"}
    if tag:
        params["tag"] = tag
    (period,) = client.get(f"/v1/models/{model}/metrics", params=params).json()["periods"]
    return period


def test_figures_parse_and_equal_the_metrics_api_and_scikit_learn(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        p, y, depots = seed(client)
        samples = scrape(client)
        whole = api_week(client, "late-delivery")
        harbour = api_week(client, "late-delivery", "depot:harbour")

    assert samples["calibrant_log_loss"][seg("late-delivery")] == whole["log_loss"]
    assert samples["calibrant_brier_score"][seg("late-delivery")] == whole["brier"]
    for key, name in (("calibration_intercept", "calibrant_calibration_intercept"),
                      ("calibration_slope", "calibrant_calibration_slope"),
                      ("oe_ratio", "calibrant_observed_expected_ratio"),
                      ("label_coverage", "calibrant_label_coverage_ratio")):
        assert samples[name][seg("late-delivery")] == whole[key], name
    assert samples["calibrant_log_loss"][seg("late-delivery", "depot", "harbour")] == harbour["log_loss"]
    # And the figures are the right ones, not only the same ones (scikit-learn computes them here).
    assert samples["calibrant_log_loss"][seg("late-delivery")] == pytest.approx(log_loss(y, p), rel=1e-12)
    mask = np.array([d == "harbour" for d in depots])
    assert samples["calibrant_brier_score"][seg("late-delivery", "depot", "harbour")] == pytest.approx(
        brier_score_loss(y[mask], p[mask]), rel=1e-12)
    assert samples["calibrant_period_predictions"][seg("late-delivery")] == N
    start = (("granularity", "week"), ("model", "late-delivery"))
    assert samples["calibrant_period_start_timestamp_seconds"][start] == WEEK.timestamp()
    assert samples["calibrant_period_end_timestamp_seconds"][start] == (WEEK + timedelta(days=7)).timestamp()
    # Counters end in _total (the format's rule; the parser names the sample so).
    assert samples["calibrant_predictions_stored_total"][(("model", "late-delivery"),)] == N
    assert samples["calibrant_outcomes_stored_total"][(("model", "late-delivery"),)] == N
    last_scored = WEEK + timedelta(hours=N - 1)
    assert samples["calibrant_feed_last_scored_timestamp_seconds"][(("model", "late-delivery"),)] == \
        last_scored.timestamp()
    assert samples["calibrant_feed_last_scored_age_seconds"][(("model", "late-delivery"),)] == \
        (NOW - last_scored).total_seconds()


def test_open_alarms_per_rule_and_service_health_match_the_api(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW)) as client:
        seed(client)
        samples = scrape(client)
        alarms = client.get("/v1/models/late-delivery/alarms", params={"state": "open"}).json()["alarms"]
        rules = client.get("/v1/models/late-delivery/rules").json()
        health = client.get("/healthz").json()
    by_rule = Counter(a["rule"] for a in alarms)
    rule_names = [r["name"] for r in (rules["rules"] if isinstance(rules, dict) else rules)]
    exposed = {dict(labels)["rule"]: value for labels, value in samples["calibrant_open_alarms"].items()}
    assert exposed == {name: by_rule.get(name, 0) for name in rule_names}
    assert samples["calibrant_webhook_outbox_pending"][()] == health["outbox"]["pending"]
    assert samples["calibrant_rollup_dirty_hours"][()] == 0  # refreshed
    assert samples["calibrant_refresh_lag_seconds"][()] == 0


def test_refresh_lag_counts_from_the_oldest_waiting_change(db: Database) -> None:
    predictions, _outcomes, *_ = traffic()
    posted_at = WEEK + timedelta(days=8)
    clock = FixedClock(posted_at)
    with make_client(db, clock=clock) as client:
        posted = client.post("/v1/models/m/predictions", json={"predictions": predictions[:5]})
        assert posted.status_code == 200
        clock.advance(timedelta(minutes=3))
        samples = scrape(client)
    assert samples["calibrant_rollup_dirty_hours"][()] == 5
    assert samples["calibrant_refresh_lag_seconds"][()] == 180.0


def test_label_sets_stop_at_the_cap_and_say_how_many_were_left_out(db: Database) -> None:
    with make_client(db, clock=FixedClock(NOW), metrics_label_sets=2) as client:
        seed(client)
        samples = scrape(client)
    shown = [dict(labels) for labels in samples["calibrant_period_predictions"]]
    # The whole model first, then the first value seen (hour 0 is harbour); mill and hill are cut.
    assert [(s["segment_key"], s["segment_value"]) for s in shown] == [("", ""), ("depot", "harbour")]
    assert samples["calibrant_label_sets_left_out"][(("model", "late-delivery"),)] == 2


def test_a_reader_key_is_required_when_keys_are(db: Database, monkeypatch, capsys) -> None:
    reader = create_key(db, monkeypatch, capsys, "read")
    with make_client(db, clock=FixedClock(NOW), auth="required") as client:
        assert client.get("/metrics").status_code == 401
        samples = scrape(client, **bearer(reader))
    assert "calibrant_webhook_outbox_pending" in samples
