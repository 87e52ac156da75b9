"""A report as of a past instant reads the same after late outcomes, corrections and new settings.

Expected log-loss and Brier values come from scikit-learn (``log_loss``, ``brier_score_loss``)
on the rows known at each instant, computed here from the scenario, not by Calibrant.
"""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime, timedelta

import orjson
import pytest
from sklearn.metrics import brier_score_loss, log_loss

from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.reports.scenario import (
    CASES,
    CORRECTION,
    FIRST_LABELS,
    LATE_LABELS,
    LATE_PREDICTION,
    MODEL,
    PLAN,
    outcome,
    post,
    prediction,
    report,
    reproducible,
)

T0 = datetime(2026, 3, 2, 8, tzinfo=UTC)


def _expected(labels: dict[str, int]) -> tuple[float, float]:
    probs = {case: p for case, p, _, _ in CASES}
    cases = sorted(labels)
    y = [labels[c] for c in cases]
    p = [probs[c] for c in cases]
    return log_loss(y, p), brier_score_loss(y, p)


def test_a_past_report_rebuilt_after_late_data_reads_the_same_and_lists_the_restatements(
        db: Database) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        post(client, "predictions", [prediction(*c) for c in CASES])
        post(client, "outcomes", [outcome(c, y) for c, y in FIRST_LABELS.items()])
        assert client.put(f"/v1/models/{MODEL}", json={"segment_keys": ["depot"]}).status_code == 200
        r = client.put(f"/v1/models/{MODEL}/plan", json=PLAN)
        assert r.status_code == 200, r.text
        assert r.json()["version"] == 1

        clock.advance(timedelta(hours=2))
        as_of = clock.now()
        first = report(client, as_of="2026-03-02T10:00:00Z")

        # Later: a new plan version, a settings change, late labels, a correction, a late prediction.
        clock.advance(timedelta(days=3))
        assert client.put(f"/v1/models/{MODEL}/plan", json={**PLAN, "owner": "Network planning"}
                          ).json()["version"] == 2
        assert client.put(f"/v1/models/{MODEL}", json={"description": "re-routing risk"}).status_code == 200
        post(client, "predictions", [prediction(*LATE_PREDICTION)])
        post(client, "outcomes", [outcome(c, y) for c, y in {**LATE_LABELS, **CORRECTION}.items()])

        clock.advance(timedelta(days=1))
        again = report(client, as_of="2026-03-02T10:00:00Z")
        now_report = report(client)

    # Identical numbers and hash, and the hash is the SHA-256 of the canonical reproducible body.
    assert reproducible(again) == reproducible(first)
    assert again["content_hash"] == first["content_hash"]
    body = {k: v for k, v in reproducible(first).items() if k != "content_hash"}
    canonical = orjson.dumps(body, option=orjson.OPT_SORT_KEYS)
    assert hashlib.sha256(canonical).hexdigest() == first["content_hash"]

    # The figures are those of the rows known at as_of (scikit-learn on the eight first labels).
    ll_then, brier_then = _expected(FIRST_LABELS)
    assert first["overall"]["n_predictions"] == 10
    assert first["overall"]["n_labeled"] == 8
    assert first["overall"]["log_loss"] == pytest.approx(ll_then, rel=1e-12)
    assert first["overall"]["brier"] == pytest.approx(brier_then, rel=1e-12)
    assert first["as_of"] == "2026-03-02T10:00:00Z"
    assert as_of == datetime(2026, 3, 2, 10, tzinfo=UTC)

    # The plan and settings stated are those in force at as_of.
    assert first["plan"]["version"] == 1
    assert first["plan"]["owner"] == PLAN["owner"]
    assert again["settings_in_force"]["content"]["description"] == ""
    assert now_report["plan"]["version"] == 2
    assert now_report["settings_in_force"]["content"]["description"] == "re-routing risk"

    # The restatements name what arrived after as_of and what it changed.
    nothing = {"predictions": 0, "first_labels": 0, "corrections": 0}
    assert first["restatements"]["arrived_after_as_of"] == nothing
    assert first["restatements"]["changed"] == []
    arrived = again["restatements"]["arrived_after_as_of"]
    assert arrived == {"predictions": 1, "first_labels": 2, "corrections": 1}
    labels_now = {**FIRST_LABELS, **LATE_LABELS, **CORRECTION}
    ll_now, _ = _expected(labels_now)
    whole = {c["metric"]: c for c in again["restatements"]["changed"] if c["scope"] == "whole_span"}
    assert whole["log_loss"]["as_of_value"] == first["overall"]["log_loss"]
    assert whole["log_loss"]["current_value"] == pytest.approx(ll_now, rel=1e-12)
    assert whole["n_predictions"]["current_value"] == 11
    assert now_report["overall"]["log_loss"] == pytest.approx(ll_now, rel=1e-12)

    # Versions and segments are tables of the same span.
    assert [v["version"] for v in first["versions"]] == ["v1", "v2"]
    assert sum(v["n_predictions"] for v in first["versions"]) == 10
    assert {(s["key"], s["value"]) for s in first["segments"]} == {("depot", "north"), ("depot", "south")}
    # The log-loss tolerance is checked against the span's value.
    tol = next(t for t in first["tolerances"] if t["metric"] == "log_loss")
    assert tol["value"] == first["overall"]["log_loss"]
    assert tol["within"] is (ll_then <= 0.70)
