"""An invented parcel-delay model with eight weeks of traffic, for the retention tests.

Six parcels a day from Monday 2026-01-05 to Sunday 2026-03-01, each labelled the evening it was
scored; the clock stands at Monday 2026-03-02 08:00, so 30 days of retention keep what was
scored from Saturday 2026-01-31 00:00 on.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from fastapi.testclient import TestClient

MODEL = "parcel-delay"
NOW = datetime(2026, 3, 2, 8, tzinfo=UTC)
FIRST_DAY = datetime(2026, 1, 5, tzinfo=UTC)
DAYS = 56
PER_DAY = 6
RETENTION_DAYS = 30
BOUNDARY = datetime(2026, 1, 31, tzinfo=UTC)  # midnight of (2026-03-02 − 30 days)
WEEKS = {"start": "2026-01-05T00:00:00Z", "end": "2026-03-02T00:00:00Z", "granularity": "week"}


def rfc(instant: datetime) -> str:
    return instant.strftime("%Y-%m-%dT%H:%M:%SZ")


def cases() -> list[dict[str, Any]]:
    """Every case: id, probability, label, scored_at, region."""
    rng = np.random.default_rng(20261203)
    out = []
    for day in range(DAYS):
        for i in range(PER_DAY):
            p = float(rng.uniform(0.05, 0.95))
            out.append({"id": f"parcel-{day:02d}-{i}", "p": p, "y": int(rng.random() < p),
                        "scored_at": FIRST_DAY + timedelta(days=day, hours=10 + i),
                        "region": "north" if i % 2 else "south"})
    return out


def post(client: TestClient, kind: str, items: list[dict[str, Any]]) -> dict[str, Any]:
    r = client.post(f"/v1/models/{MODEL}/{kind}", json={kind: items})
    assert r.status_code == 200, r.text
    return r.json()


def load(client: TestClient) -> list[dict[str, Any]]:
    every = cases()
    post(client, "predictions", [{"id": c["id"], "probability": c["p"], "scored_at": rfc(c["scored_at"]),
                                  "tags": {"region": c["region"]}} for c in every])
    post(client, "outcomes", [{"id": c["id"], "label": c["y"],
                               "observed_at": rfc(c["scored_at"].replace(hour=20))} for c in every])
    return every


def run_jobs(client: TestClient) -> dict[str, Any]:
    """Run every job to the end (a refresh job, waited for); what each job did."""
    r = client.post("/v1/refresh", params={"wait": "true"})
    assert r.status_code == 200, r.text
    assert r.json()["state"] == "succeeded", r.json()
    return dict(r.json()["result"])


def weekly(client: TestClient, **params: str) -> list[dict[str, Any]]:
    r = client.get(f"/v1/models/{MODEL}/metrics", params={**WEEKS, **params})
    assert r.status_code == 200, r.text
    return r.json()["periods"]


def set_retention(client: TestClient, days: int | None = RETENTION_DAYS) -> None:
    r = client.put(f"/v1/models/{MODEL}", json={"retention_days": days})
    assert r.status_code == 200, r.text


RETENTION_FLAGS = ("raw_rows_removed", "computed_under_settings_of")


def figures(period: dict[str, Any]) -> dict[str, Any]:
    """A period's figures without the retention flags (which change when rows are removed)."""
    return {k: v for k, v in period.items() if k not in RETENTION_FLAGS}
