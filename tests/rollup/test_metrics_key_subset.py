"""Asking the metrics service for some metrics only (as the pages do) changes none of them:
every count, every asked metric, its interval and its status equal the full answer's, on both
databases; the costlier metrics not asked for are left out."""

from __future__ import annotations

from datetime import timedelta

import numpy as np

from calibrant.clock import FixedClock
from calibrant.rollup import metrics_service
from calibrant.store.engine import make_session_factory
from calibrant.vocabulary.metrics import COUNT_KEYS
from tests.alarms.streams import T0, iso, make_day, post_day, refresh
from tests.conftest import Database, make_client

ASKED = frozenset({"log_loss", "brier", "calibration_intercept", "calibration_slope", "oe_ratio", "psi",
                   "label_coverage"})
SKIPPED = ("calibration_slope_robust", "spiegelhalter_z", "ece", "auc", "brier_reliability")


def test_a_key_subset_gives_the_same_values_for_the_keys_asked(db: Database) -> None:
    clock = FixedClock(T0)
    with make_client(db, clock=clock) as client:
        body = {"outcome_horizon_days": 1, "segment_keys": ["region"]}
        assert client.put("/v1/models/m", json=body).status_code == 201
        rng = np.random.default_rng(3)
        for day in range(10):
            post_day(client, "m", make_day(rng, day, 150))
        clock.set(T0 + timedelta(days=10, hours=12))  # the last days are not mature yet
        refresh(client)
    sessions = make_session_factory(db.engine)
    for tag in ([], ["region:south"]):
        with sessions() as session:
            query = {"start": iso(T0), "end": iso(T0 + timedelta(days=14)), "granularity": "day",
                     "window": None, "version": None, "tag": tag, "now": clock.now()}
            full = metrics_service.metrics(session, "m", **query)
            some = metrics_service.metrics(session, "m", **query, keys=ASKED)
        assert len(full["periods"]) == len(some["periods"]) == 14
        for whole, part in zip(full["periods"], some["periods"], strict=True):
            for key in (*COUNT_KEYS, *ASKED):
                assert part[key] == whole[key], key
                if f"{key}_ci" in whole:
                    assert part[f"{key}_ci"] == whole[f"{key}_ci"], key
                assert part["status"].get(key) == whole["status"].get(key), key
            assert not set(SKIPPED) & set(part)
            assert set(SKIPPED) <= set(whole)
        # Not vacuous: measured values, and periods still waiting for maturity, are both compared.
        assert any(p["log_loss"] is not None for p in some["periods"])
        assert any(p["status"].get("log_loss") for p in some["periods"])
