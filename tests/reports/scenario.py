"""An invented courier's parcel-delay model: a week of predictions, outcomes, a plan, and later data.

Helpers shared by the report tests; the expected figures come from scikit-learn in the tests.
"""

from __future__ import annotations

from typing import Any

MODEL = "parcel-delay"
SPAN = {"start": "2026-02-23T00:00:00Z", "end": "2026-03-02T00:00:00Z"}
# Ten cases scored on Tuesday 2026-02-24, two versions, tagged by depot.
CASES = [
    (f"p{i:02d}", p, "v1" if i % 3 else "v2", "north" if i % 2 else "south")
    for i, p in enumerate([0.12, 0.81, 0.35, 0.66, 0.05, 0.92, 0.47, 0.28, 0.73, 0.59])
]
FIRST_LABELS = {"p00": 0, "p01": 1, "p02": 0, "p03": 1, "p04": 0, "p05": 1, "p06": 1, "p07": 0}
LATE_LABELS = {"p08": 0, "p09": 1}
CORRECTION = {"p06": 0}  # p06 was first labeled 1; the label is corrected to 0
LATE_PREDICTION = ("p10", 0.64, "v1", "north")

PLAN: dict[str, Any] = {
    "owner": "Delivery analytics lead",
    "intended_use": "Rank parcels by risk of a late delivery so depots can re-route early.",
    "outcome_definition": "1 when the parcel reaches the customer after the promised day.",
    "horizon_days": 7,
    "tolerances": [
        {"metric": "log_loss", "upper": 0.70, "rule": "excess-log-loss-weekly"},
        {"metric": "calibration_slope", "lower": 0.6, "upper": 1.5, "rule": "calibration-slope-weekly"},
    ],
    "review_cadence": "monthly",
    "escalation_contact": "model-risk@courier.invalid",
}


def prediction(case: str, p: float, version: str, depot: str) -> dict[str, Any]:
    return {"id": case, "probability": p, "scored_at": "2026-02-24T10:15:00Z", "version": version,
            "tags": {"depot": depot}}


def outcome(case: str, label: int) -> dict[str, Any]:
    return {"id": case, "label": label, "observed_at": "2026-02-27T18:00:00Z"}


def post(client: Any, kind: str, items: list[dict[str, Any]]) -> None:
    r = client.post(f"/v1/models/{MODEL}/{kind}", json={kind: items})
    assert r.status_code == 200, r.text


def report(client: Any, **params: str) -> dict[str, Any]:
    r = client.get(f"/v1/models/{MODEL}/report", params={**SPAN, **params})
    assert r.status_code == 200, r.text
    return r.json()


def reproducible(document: dict[str, Any]) -> dict[str, Any]:
    """The part of a report that must read the same whenever it is rebuilt for its as_of."""
    return {k: v for k, v in document.items() if k not in {"restatements", "snapshot_id", "generated_at"}}
