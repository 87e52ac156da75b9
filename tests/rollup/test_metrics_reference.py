"""PSI of each period against the model's reference: a range of its own traffic or an uploaded set.

The expected PSI is numpy on the raw rows. The bins are the reference's
deciles snapped to the fine grid (docs/methods.md §17.1, summary_drift): for each k/10
the fine edge whose cumulative reference share is nearest; the test rebuilds
the grid from its definition and bins the raw rows itself. PSI = Σ (a − e)
ln(a/e) with ½ added to every count (docs/methods.md §17.2).
"""

from __future__ import annotations

import itertools
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from calibrant.clock import FixedClock
from tests.conftest import Database, make_client
from tests.rollup.reference import FINE_EDGES, assert_strict_json, fine_bin
from tests.rollup.synthetic import MONDAY, make_traffic, post_all, refresh

MODEL = "drift"
WEEKS = {"start": "2026-03-02T00:00:00Z", "end": "2026-03-16T00:00:00Z", "granularity": "week"}
WEEK_STARTS = ["2026-03-02T00:00:00Z", "2026-03-09T00:00:00Z"]  # the two ISO weeks of WEEKS


def snapped_decile_edges(reference: np.ndarray, n_bins: int = 10) -> list[np.ndarray]:
    """Every edge set the snapping rule allows: a target k/10 whose nearest cumulative share
    is shared by several fine edges (empty reference bins between them) may use any of them."""
    counts = np.bincount(fine_bin(reference), minlength=FINE_EDGES.size + 1)
    share = np.cumsum(counts)[:-1] / counts.sum()  # share below the upper edge of each fine bin
    choices = []
    for target in np.arange(1, n_bins) / n_bins:
        gap = np.abs(share - target)
        choices.append(np.flatnonzero(gap == gap.min()).tolist())
    return [FINE_EDGES[np.unique(pick)] for pick in itertools.product(*choices)]


def psi_on(edges: np.ndarray, reference: np.ndarray, current: np.ndarray) -> float:
    r = np.bincount(np.searchsorted(edges, reference, side="right"), minlength=edges.size + 1) + 0.5
    c = np.bincount(np.searchsorted(edges, current, side="right"), minlength=edges.size + 1) + 0.5
    e, a = r / r.sum(), c / c.sum()
    return float(np.sum((a - e) * np.log(a / e)))


def assert_psi(actual: float | None, reference: np.ndarray, current: np.ndarray) -> float:
    """The API's PSI equals numpy's on one of the allowed snapped edge sets; returns it."""
    candidates = [psi_on(edges, reference, current) for edges in snapped_decile_edges(reference)]
    assert actual is not None
    assert any(actual == pytest.approx(c, rel=1e-9, abs=1e-12) for c in candidates), (actual, candidates)
    return actual


@pytest.fixture
def posted(db: Database):
    traffic = make_traffic(n_cases=1400, days=14, seed=11)
    with make_client(db, clock=FixedClock(datetime(2026, 4, 1, tzinfo=UTC))) as client:
        post_all(client, MODEL, traffic.frame)
        refresh(client)
        yield client, traffic


def weeks(client) -> list[dict]:
    r = client.get(f"/v1/models/{MODEL}/metrics", params=WEEKS)
    assert r.status_code == 200, r.text
    periods = assert_strict_json(r.text)["periods"]
    assert [p["start"] for p in periods] == WEEK_STARTS  # so no loop over them runs zero times
    return periods


def test_no_reference_gives_null_psi_with_undefined_status(posted) -> None:
    client, _ = posted
    for period in weeks(client):
        assert period["n_predictions"] > 0
        assert period["psi"] is None
        assert period["status"]["psi"]["state"] == "no_value"


def test_psi_against_a_traffic_range(posted) -> None:
    client, traffic = posted
    ref_end = MONDAY + timedelta(days=7)
    r = client.put(f"/v1/models/{MODEL}", json={"reference": {
        "kind": "traffic", "start": MONDAY.isoformat(), "end": ref_end.isoformat()}})
    assert r.status_code == 200, r.text
    refresh(client)
    reference = traffic.between(MONDAY, ref_end).probability.to_numpy()
    for period in weeks(client):
        lo = datetime.fromisoformat(period["start"])
        current = traffic.between(lo, lo + timedelta(days=7)).probability.to_numpy()
        assert_psi(period["psi"], reference, current)


def test_psi_against_a_traffic_range_of_one_version(posted) -> None:
    client, traffic = posted
    ref_end = MONDAY + timedelta(days=7)
    r = client.put(f"/v1/models/{MODEL}", json={"reference": {
        "kind": "traffic", "start": MONDAY.isoformat(), "end": ref_end.isoformat(), "version": "v1"}})
    assert r.status_code == 200, r.text
    f = traffic.frame
    reference = f[(f.version == "v1") & (f.scored_at < ref_end)].probability.to_numpy()
    current = traffic.between(ref_end, ref_end + timedelta(days=7)).probability.to_numpy()
    psi = assert_psi(weeks(client)[1]["psi"], reference, current)
    # the version matters: against every version's rows of that range the PSI would differ
    every_version = traffic.between(MONDAY, ref_end).probability.to_numpy()
    assert every_version.size > reference.size
    assert not any(psi == pytest.approx(psi_on(edges, every_version, current), rel=1e-9, abs=1e-12)
                   for edges in snapped_decile_edges(every_version))


def test_psi_against_an_uploaded_set(posted) -> None:
    client, traffic = posted
    rng = np.random.default_rng(5)
    uploaded = rng.beta(2.0, 5.0, 3000)
    labels = (rng.random(3000) < uploaded).astype(int)
    r = client.post(f"/v1/models/{MODEL}/reference",
                    json={"probabilities": uploaded.tolist(), "labels": labels.tolist()})
    assert r.status_code == 200, r.text
    assert r.json()["reference"]["kind"] == "uploaded"
    for period in weeks(client):
        lo = datetime.fromisoformat(period["start"])
        current = traffic.between(lo, lo + timedelta(days=7)).probability.to_numpy()
        # a real shift: beta(2,5) against the traffic's logit-normal
        assert assert_psi(period["psi"], uploaded, current) > 0.05


def test_traffic_reference_with_no_rows_is_undefined(posted) -> None:
    client, _ = posted
    r = client.put(f"/v1/models/{MODEL}", json={"reference": {
        "kind": "traffic", "start": "2025-01-01T00:00:00Z", "end": "2025-02-01T00:00:00Z"}})
    assert r.status_code == 200, r.text  # a reference is set: its range just holds no rows
    assert r.json()["reference"]["kind"] == "traffic"
    for period in weeks(client):
        assert period["n_predictions"] > 0
        assert period["psi"] is None
        assert period["status"]["psi"]["state"] == "no_value"
