"""Synthetic prediction/outcome streams posted through the API, matured by a FixedClock.

Outcomes are drawn from the predictions themselves (calibrated) or from odds
shifted by a known ratio (``stats.cusum.odds_shifted_risk``: q = OR p/(1 − p + OR p),
Steiner et al. 2000), from a known day on, in one segment.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np
from fastapi.testclient import TestClient

T0 = datetime(2026, 3, 2, tzinfo=UTC)  # a Monday: ISO weeks line up with the stream's days


def iso(t: datetime) -> str:
    return t.isoformat().replace("+00:00", "Z")


@dataclass
class Day:
    day: int
    ids: list[str]
    p: np.ndarray
    y: np.ndarray
    region: list[str]
    scored_at: list[datetime]


def make_day(rng: np.random.Generator, day: int, n: int, *, shift_from: int | None = None,
             odds_ratio: float = 2.0, shifted_region: str = "south", beta: tuple[float, float] = (2, 8),
             prefix: str = "c") -> Day:
    p = rng.beta(*beta, n)
    region = ["north" if i % 2 == 0 else "south" for i in range(n)]
    q = p.copy()
    if shift_from is not None and day >= shift_from:
        hit = np.array([r == shifted_region for r in region])
        q[hit] = odds_ratio * p[hit] / (1 - p[hit] + odds_ratio * p[hit])
    y = (rng.random(n) < q).astype(int)
    start = T0 + timedelta(days=day)
    scored = [start + timedelta(seconds=int(s)) for s in np.sort(rng.integers(0, 86400, n))]
    return Day(day, [f"{prefix}{day}-{i}" for i in range(n)], p, y, region, scored)


def post_day(client: TestClient, model: str, d: Day, *, outcomes: bool = True) -> None:
    preds = [{"id": i, "probability": float(p), "scored_at": iso(t), "tags": {"region": r}}
             for i, p, t, r in zip(d.ids, d.p, d.scored_at, d.region, strict=True)]
    r = client.post(f"/v1/models/{model}/predictions", json={"predictions": preds})
    assert r.status_code == 200, r.text
    if outcomes:
        post_outcomes(client, model, d, range(len(d.ids)))


def post_outcomes(client: TestClient, model: str, d: Day, which) -> None:
    items = [{"id": d.ids[i], "label": int(d.y[i]), "observed_at": iso(d.scored_at[i] + timedelta(hours=6))}
             for i in which]
    r = client.post(f"/v1/models/{model}/outcomes", json={"outcomes": items})
    assert r.status_code == 200, r.text


def setup_model(client: TestClient, model: str, *, keep: tuple[str, ...], chart_params: dict | None = None,
                **settings) -> None:
    body = {"outcome_horizon_days": 1, "segment_keys": ["region"], **settings}
    assert client.put(f"/v1/models/{model}", json=body).status_code in (200, 201)
    rules = client.get(f"/v1/models/{model}/rules").json()["rules"]
    for rule in rules:
        change: dict = {"enabled": rule["name"] in keep}
        if rule["kind"] == "calibration_chart" and chart_params:
            change["params"] = chart_params
        r = client.put(f"/v1/models/{model}/rules/{rule['name']}", json=change)
        assert r.status_code == 200, r.text


def refresh(client: TestClient) -> dict:
    """Run every job to the end (a refresh job, waited for); what each job did."""
    r = client.post("/v1/refresh", params={"wait": "true"})
    assert r.status_code == 200, r.text
    assert r.json()["state"] == "succeeded", r.json()
    return r.json()["result"]
