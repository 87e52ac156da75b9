"""Seeded synthetic traffic for the rollup and metrics tests, posted through the HTTP API.

An invented scenario: a parcel-delay model scores cases at three hours of the
day (00, 11 and 23 UTC, so rows sit next to day boundaries), under two
versions; a share of cases is also scored by a shadow version under the same
id, so one outcome labels both. Tags: ``depot`` (declared as a segment key by
the tests) and ``channel`` (never declared). About 15 % of cases never get an
outcome.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
from fastapi.testclient import TestClient
from scipy.special import expit

DEPOTS = ("harbour", "hill", "airport")
CHANNELS = ("web", "phone")
HOURS = (0, 11, 23)
MONDAY = datetime(2026, 3, 2, tzinfo=UTC)  # an ISO week start
BATCH = 5000


@dataclass(frozen=True)
class Traffic:
    """The raw rows as the test knows them: one row per prediction, label NaN when none."""

    frame: pd.DataFrame

    def between(self, start: datetime, end: datetime) -> pd.DataFrame:
        """Rows scored in [start, end), chosen by plain pandas (never by service code)."""
        f = self.frame
        return f[(f.scored_at >= pd.Timestamp(start)) & (f.scored_at < pd.Timestamp(end))]


def make_traffic(n_cases: int = 1800, days: int = 28, seed: int = 7, start: datetime = MONDAY) -> Traffic:
    rng = np.random.default_rng(seed)
    day = rng.integers(0, days, n_cases)
    hour = rng.choice(HOURS, n_cases)
    second = rng.integers(0, 3600, n_cases)
    scored = [start + timedelta(days=int(d), hours=int(h), seconds=int(s))
              for d, h, s in zip(day, hour, second, strict=True)]
    x = rng.normal(-0.8, 1.1, n_cases)
    p = expit(x)
    # the truth is a little miscalibrated, so slope and intercept are not trivially 1 and 0
    y = (rng.random(n_cases) < expit(0.3 + 0.8 * x)).astype(float)
    y[rng.random(n_cases) < 0.15] = np.nan
    rows = pd.DataFrame({
        "id": [f"case-{i:05d}" for i in range(n_cases)],
        "version": np.where(rng.random(n_cases) < 0.7, "v1", "v2"),
        "probability": p,
        "scored_at": pd.to_datetime(scored, utc=True),
        "depot": rng.choice(DEPOTS, n_cases),
        "channel": rng.choice(CHANNELS, n_cases),
        "label": y,
    })
    shadow = rows[rng.random(n_cases) < 0.25].copy()
    shadow["version"] = "shadow"
    noise = rng.normal(0, 0.3, len(shadow))
    shadow["probability"] = expit(logit_of(shadow["probability"].to_numpy()) + noise)
    return Traffic(pd.concat([rows, shadow], ignore_index=True))


def logit_of(p: np.ndarray) -> np.ndarray:
    return np.log(p / (1.0 - p))


def prediction_items(frame: pd.DataFrame) -> list[dict]:
    return [
        {
            "id": r.id,
            "probability": float(r.probability),
            "scored_at": r.scored_at.isoformat(),
            "version": r.version,
            "tags": {"depot": r.depot, "channel": r.channel},
        }
        for r in frame.itertuples()
    ]


def outcome_items(frame: pd.DataFrame) -> list[dict]:
    cases = frame.dropna(subset=["label"]).drop_duplicates("id")
    return [
        {"id": r.id, "label": int(r.label), "observed_at": (r.scored_at + pd.Timedelta(days=2)).isoformat()}
        for r in cases.itertuples()
    ]


def post_all(client: TestClient, model: str, frame: pd.DataFrame, *, outcomes: bool = True) -> None:
    items = prediction_items(frame)
    for i in range(0, len(items), BATCH):
        r = client.post(f"/v1/models/{model}/predictions", json={"predictions": items[i:i + BATCH]})
        assert r.status_code == 200, r.text
    if outcomes:
        labels = outcome_items(frame)
        for i in range(0, len(labels), BATCH):
            r = client.post(f"/v1/models/{model}/outcomes", json={"outcomes": labels[i:i + BATCH]})
            assert r.status_code == 200, r.text


def refresh(client: TestClient) -> dict:
    """Run every job to the end (a refresh job, waited for); what each job did."""
    r = client.post("/v1/refresh", params={"wait": "true"})
    assert r.status_code == 200, r.text
    assert r.json()["state"] == "succeeded", r.json()
    return r.json()["result"]


def metrics(client: TestClient, model: str, **params: str) -> dict:
    r = client.get(f"/v1/models/{model}/metrics", params=params)
    assert r.status_code == 200, r.text
    return r.json()
