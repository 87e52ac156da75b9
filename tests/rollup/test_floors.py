"""Floors, null levels and p-values of GET …/metrics and …/reliability, on both databases.

Expected values: scikit-learn (log_loss, brier_score_loss), numpy (Spiegelhalter's z, ECE on
[k/10, (k+1)/10) bins, the null simulation with Bernoulli(p_i) per case) and scipy
(the normal p-value); the floors are those docs/methods.md §20.1 pins.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.metrics import brier_score_loss, log_loss

from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.rollup.reference import assert_strict_json
from tests.rollup.synthetic import MONDAY, make_traffic, post_all, refresh

MODEL = "small-window"
NOW = datetime(2026, 6, 1, tzinfo=UTC)
WEEK = {"start": MONDAY.isoformat(), "end": (MONDAY + timedelta(days=7)).isoformat(), "granularity": "week"}
# every metric that needs outcomes, with the floor docs/methods.md §20.1 gives it
SCORE = "at least 5 events and 5 non-events"
FLOORS = {
    "observed_rate": "at least 10 labeled cases",
    "oe_ratio": SCORE, "log_loss": SCORE, "log_loss_expected": SCORE, "brier": SCORE,
    "brier_reliability": SCORE, "brier_resolution": SCORE, "brier_uncertainty": SCORE,
    "calibration_intercept": SCORE, "spiegelhalter_z": SCORE, "ece": SCORE,
    "calibration_slope": "at least 20 events and 20 non-events",
    "calibration_slope_robust": "at least 20 events and 20 non-events",
    "auc": "at least 10 events and 10 non-events",
}
INTERVALS = ("observed_rate", "oe_ratio", "log_loss", "brier", "calibration_intercept",
             "calibration_slope", "calibration_slope_robust", "auc")


def three_cases() -> pd.DataFrame:
    return pd.DataFrame({
        "id": ["a", "b", "c"], "version": "v1", "probability": [0.2, 0.6, 0.9],
        "scored_at": pd.to_datetime([MONDAY + timedelta(hours=h) for h in (1, 30, 80)], utc=True),
        "depot": "hill", "channel": "web", "label": [1.0, 0.0, 1.0],
    })


def test_three_case_week_is_below_every_outcome_floor(db: Database) -> None:
    frame = three_cases()
    with make_client(db, clock=FixedClock(NOW)) as client:
        post_all(client, MODEL, frame)
        refresh(client)
        r = client.get(f"/v1/models/{MODEL}/metrics", params=WEEK)
    assert r.status_code == 200, r.text
    (period,) = assert_strict_json(r.text)["periods"]
    assert period["n_labeled"] == 3
    for key, floor in FLOORS.items():
        status = period["status"][key]
        assert status["state"] == "too_few_cases", key
        assert floor in status["reason"], status
        assert "2 events and 1 non-events" in status["reason"], status
        if key in INTERVALS:
            assert period[f"{key}_ci"] is None, key
    for key in ("calibration_slope", "calibration_slope_robust", "auc"):
        assert period[key] is None  # the slope and AUC keep no value below their floor
    y, p = frame.label.to_numpy(), frame.probability.to_numpy()
    assert period["log_loss"] == pytest.approx(log_loss(y, p), rel=1e-12)  # sklearn; value kept
    assert period["brier"] == pytest.approx(brier_score_loss(y, p), rel=1e-12)  # sklearn
    assert period["spiegelhalter_z_p_value"] is None
    assert period["ece_null"] is None
    assert "mean_probability" not in period["status"]  # label-free: no floor


def _ece(p: np.ndarray, y: np.ndarray) -> np.ndarray:
    """ECE over [k/10, (k+1)/10) bins with numpy, for y of shape (draws, cases)."""
    k = np.minimum((p * 10).astype(int), 9)
    n = np.bincount(k, minlength=10)
    gaps = np.zeros(y.shape[:-1])
    for b in np.flatnonzero(n):
        gaps = gaps + np.abs(y[..., k == b].sum(axis=-1) - p[k == b].sum())
    return gaps / p.size


def test_week_above_the_floors_has_intervals_p_value_and_ece_null_level(db: Database) -> None:
    traffic = make_traffic(n_cases=1800, days=7)
    frame = traffic.frame[traffic.frame.version == "v1"]
    with make_client(db, clock=FixedClock(NOW)) as client:
        post_all(client, MODEL, frame)
        refresh(client)
        r = client.get(f"/v1/models/{MODEL}/metrics", params={**WEEK, "version": "v1"})
        rel = client.get(f"/v1/models/{MODEL}/reliability", params={
            "start": WEEK["start"], "end": WEEK["end"], "bins": "10", "strategy": "uniform", "version": "v1"})
    assert r.status_code == 200, r.text
    assert rel.status_code == 200, rel.text
    (period,) = assert_strict_json(r.text)["periods"]
    diagram = assert_strict_json(rel.text)
    labeled = frame.dropna(subset=["label"])
    p, y = labeled.probability.to_numpy(), labeled.label.to_numpy()
    assert min(y.sum(), (1 - y).sum()) >= 20  # the week is above every floor
    for key in FLOORS:
        assert key not in period["status"], (key, period["status"].get(key))
    for key in INTERVALS:
        lo, hi = period[f"{key}_ci"]
        assert lo <= period[key] <= hi, key
    # Spiegelhalter (1986) z in numpy and its two-sided normal p-value from scipy
    z = float(np.sum((y - p) * (1 - 2 * p)) / np.sqrt(np.sum((1 - 2 * p) ** 2 * p * (1 - p))))
    assert period["spiegelhalter_z"] == pytest.approx(z, rel=1e-9)
    assert period["spiegelhalter_z_p_value"] == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-7)
    assert diagram["spiegelhalter_z"] == pytest.approx(z, rel=1e-9)
    assert diagram["spiegelhalter_z_p_value"] == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-7)
    assert period["ece"] == pytest.approx(float(_ece(p, y[None, :])[0]), rel=1e-9)  # numpy
    assert diagram["ece"] == pytest.approx(period["ece"], rel=1e-12)

    # The null levels against numpy's own simulation with one Bernoulli(p_i) per case (the
    # exact null). The service takes a binomial per bin: its mean may exceed the exact one by
    # the binomial's larger spread, sqrt of the largest per-bin variance ratio
    # n_b f̄(1 − f̄) / Σ p(1 − p), computed here; plus 4 Monte Carlo SE of this simulation.
    draws = 4000
    sims = _ece(p, (np.random.default_rng(3).random((draws, p.size)) < p).astype(float))
    k = np.minimum((p * 10).astype(int), 9)
    ratio = max(float(np.sum(k == b) * p[k == b].mean() * (1 - p[k == b].mean())
                      / np.sum(p[k == b] * (1 - p[k == b]))) for b in np.unique(k))
    inflation = math.sqrt(ratio)
    null = period["ece_null"]
    mc = 4 * sims.std() / math.sqrt(draws)
    assert sims.mean() - mc <= null["expected"] <= sims.mean() * inflation + mc
    # The 95 % point is a gamma law's with the same mean and variance, within 1.3 % of a
    # simulation (docs/methods.md §12.1); this simulation's 0.95 quantile is known to 3 rank
    # standard errors, sqrt(0.95·0.05/4000) = 0.34 points of level.
    rank = 3 * math.sqrt(0.95 * 0.05 / draws)
    assert np.quantile(sims, 0.95 - rank) / 1.013 <= null["upper_95"]
    assert null["upper_95"] <= np.quantile(sims, 0.95 + rank) * 1.013 * inflation
    assert diagram["ece_null"] == null  # the same bins, counts and seeded draws
