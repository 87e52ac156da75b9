"""Without a horizon a chart reads a case only once its age passes the measured p95 delay.

Outcomes of every case (events and non-events) are reported after a Gamma(3, scale 3)
delay: mean 9 days, 95th percentile 18.89 days (scipy's ``gamma.ppf``; not from the code
under test). The service measures the delay from what was reported by then, and the
chart of the model (no horizon, lag 0) must leave every case younger than that p95 unread
and read every older one; after the clock moves on, the cases that have since passed it
are read. TOL covers the estimate's sampling error (the asymptotic SE of a sample
quantile, sqrt(q(1 − q)/n) / f(x_q) ≈ 0.35 day for the ~2,900 reports here) and the 4 %
spacing of the grid the distribution is kept on (0.75 day at 19 days).

The outcomes are drawn with the model's odds tripled (Steiner et al. 2000 odds shift), so
the upper chart crosses; the alarm's evidence records the wait. Later, three events on
the alarm's run are corrected to non-events and some of the run's cases get their first
label: the alarm keeps its evidence and gains a restatement whose statistic moves by the
chart's weights W = y ln R − ln(1 − p + R p) (Steiner et al. 2000), computed here.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from fastapi.testclient import TestClient
from scipy import stats

from calibrant.clock import FixedClock
from tests.alarms.streams import iso, refresh, setup_model
from tests.conftest import Database, make_client

NOW = datetime(2026, 6, 1, tzinfo=UTC)
DAYS, PER_DAY = 100, 30
SHAPE, SCALE = 3.0, 3.0
P95 = float(stats.gamma.ppf(0.95, SHAPE, scale=SCALE))
TOL = 2.0  # days
RULE = "calibration-chart-upper"
SMALL_DESIGN = {"min_design_cases": 400, "design_sample": 800}
R_A = 2.0
HOUR = timedelta(hours=1)


def _data(rng: np.random.Generator) -> dict[str, np.ndarray]:
    n = DAYS * PER_DAY
    age = np.sort(rng.uniform(0.0, DAYS, n))[::-1]  # days before NOW, oldest first
    scored = np.array([NOW - timedelta(days=float(a)) for a in age])
    p = rng.beta(2, 8, n)
    q = 3 * p / (1 - p + 3 * p)
    return {"id": np.array([f"n{i:05d}" for i in range(n)]), "scored": scored, "age": age, "p": p,
            "y": (rng.random(n) < q).astype(int), "delay": rng.gamma(SHAPE, SCALE, n)}


def _post_outcomes(client: TestClient, d: dict[str, np.ndarray], which: np.ndarray) -> None:
    items = [{"id": d["id"][i], "label": int(d["y"][i]),
              "observed_at": iso(d["scored"][i] + timedelta(days=float(d["delay"][i])))} for i in which]
    for k in range(0, len(items), 5000):
        r = client.post("/v1/models/slow/outcomes", json={"outcomes": items[k:k + 5000]})
        assert r.status_code == 200, r.text


def _stream(client: TestClient) -> dict:
    rule = client.get(f"/v1/models/slow/rules/{RULE}").json()
    return next(s for s in rule["streams"] if s["segment"] is None)


def _read_bounds(d: dict[str, np.ndarray], now: datetime) -> tuple[int, int]:
    """(cases that must have been read, cases that may have been): older than P95 + TOL, not younger
    than P95 − TOL at ``now`` (an hour's margin: the chart's order is by the end of the scored hour)."""
    age = np.array([(now - s) / timedelta(days=1) for s in d["scored"]])
    return int(np.sum(age >= P95 + TOL + 1 / 24)), int(np.sum(age >= P95 - TOL))


def _instant(text: str) -> datetime:
    return datetime.fromisoformat(text)


def test_chart_without_horizon_waits_for_the_p95_delay_and_restates_its_alarm(db: Database) -> None:
    clock = FixedClock(NOW)
    client = make_client(db, clock=clock)
    setup_model(client, "slow", keep=(RULE,), chart_params=SMALL_DESIGN, outcome_horizon_days=None,
                segment_keys=[])
    d = _data(np.random.default_rng(15))
    preds = [{"id": i, "probability": float(p), "scored_at": iso(s)}
             for i, p, s in zip(d["id"], d["p"], d["scored"], strict=True)]
    assert client.post("/v1/models/slow/predictions", json={"predictions": preds}).status_code == 200
    observed = np.array([s + timedelta(days=float(x)) for s, x in zip(d["scored"], d["delay"], strict=True)])
    _post_outcomes(client, d, np.flatnonzero(observed <= NOW))
    refresh(client)

    delay = client.get("/v1/models/slow").json()["outcome_delay"]
    assert abs(delay["quantiles_days"]["p95"] - P95) < TOL
    must, may = _read_bounds(d, NOW)
    stream = _stream(client)
    assert must <= stream["consumed"] <= may  # nothing younger than the p95 was read
    assert stream["consumed"] < len(d["id"])

    alarms = client.get("/v1/models/slow/alarms", params={"rule": RULE}).json()["alarms"]
    assert len(alarms) == 1
    alarm = alarms[0]
    ev = alarm["evidence"]
    completeness = ev["label_completeness"]
    assert abs(completeness["complete_after_days"] - P95) < TOL
    assert abs(completeness["wait_after_maturity_days"] - P95) < TOL  # lag 0: the wait is the p95
    # both classes' delays are measured: the chart is fed the risk given a label by the case's age
    assert completeness["risk_adjusted_for_delay"] is True
    # Every case read was at least P95 − TOL old; by the Gamma law at least this share had reported.
    assert completeness["mean_reported_share"] >= stats.gamma.cdf(P95 - TOL, SHAPE, scale=SCALE)
    crossing = int(np.flatnonzero(d["id"] == ev["crossing_case"])[0])
    assert d["age"][crossing] >= P95 - TOL

    # The run: from the hour of the path's last point at S = 0 to the crossing case (docs/methods.md §23).
    path = ev["chart_path"]
    zeros = [t for t, s in path[:-1] if s <= 0.0]
    assert zeros, "the kept path reaches back to the run's start"
    run_start, crossed = _instant(zeros[-1]), _instant(ev["crossed_at"])
    matured = np.array([s.replace(minute=0, second=0, microsecond=0) + HOUR for s in d["scored"]])
    on_run = np.array([run_start <= m and (m, i) <= (crossed, ev["crossing_case"])
                       for m, i in zip(matured, d["id"], strict=True)])
    inside = on_run & (matured > run_start) & (matured < crossed) & (observed <= NOW)
    corrected = np.flatnonzero(inside & (d["y"] == 1))[:3]
    assert corrected.size == 3

    # Five days on: the outcomes reported meanwhile, and three of the run's events corrected.
    later = NOW + timedelta(days=5)
    clock.set(later)
    _post_outcomes(client, d, np.flatnonzero((observed > NOW) & (observed <= later)))
    fixes = [{"id": d["id"][i], "label": 0, "observed_at": iso(later)} for i in corrected]
    r = client.post("/v1/models/slow/outcomes", json={"outcomes": fixes})
    assert r.json()["corrected"] == 3
    refresh(client)

    must, may = _read_bounds(d, later)
    again = _stream(client)
    assert must <= again["consumed"] <= may
    assert again["consumed"] > stream["consumed"]  # the cases that passed the p95 meanwhile were read

    got = client.get(f"/v1/models/slow/alarms/{alarm['id']}").json()
    assert got["evidence"] == ev  # what the chart saw, kept
    assert len(got["restatements"]) == 1
    entry = got["restatements"][0]
    late = np.flatnonzero(on_run & (observed > NOW) & (observed <= later))
    # W = y ln R − ln(1 − p + R p) (Steiner et al. 2000): a 1 corrected to 0 moves S by −ln R; a case
    # passed over unlabeled and labeled now adds its W.
    late_w = d["y"][late] * math.log(R_A) - np.log(1 - d["p"][late] + R_A * d["p"][late])
    expected = ev["statistic"] - 3 * math.log(R_A) + float(np.sum(late_w))
    assert entry["statistic"] == pytest.approx(expected, rel=1e-9, abs=1e-9)
    assert entry["changed_cases"] == 3 + late.size
    assert entry["corrected_labels"] == 3
    assert entry["late_labels"] == late.size
    assert entry["events_added"] == int(d["y"][late].sum()) - 3
    assert entry["n"] == ev["n"] + late.size
    assert entry["still_crosses"] is (expected > ev["control_limit"])
    assert _instant(entry["run_start"]) == run_start
    assert entry["run_truncated"] is False
    assert entry["at"].startswith(later.date().isoformat())

    clock.advance(timedelta(hours=2))
    refresh(client)
    assert len(client.get(f"/v1/models/slow/alarms/{alarm['id']}").json()["restatements"]) == 1


def test_chart_without_horizon_reads_nothing_until_the_delay_is_measured(db: Database) -> None:
    # Fewer than 20 reports: no p95 yet (rollup.outcome_delay.MIN_REPORTS_FOR_P95). The chart holds
    # where it is; once 20 are in it reads from its first case, in order, skipping nothing.
    clock = FixedClock(NOW)
    client = make_client(db, clock=clock)
    setup_model(client, "slow", keep=(RULE,), chart_params=SMALL_DESIGN, outcome_horizon_days=None,
                segment_keys=[])
    scored = [NOW - timedelta(days=10, minutes=7 * i) for i in range(40)]
    preds = [{"id": f"s{i}", "probability": 0.2, "scored_at": iso(s)} for i, s in enumerate(scored)]
    assert client.post("/v1/models/slow/predictions", json={"predictions": preds}).status_code == 200

    def report(ids: range) -> None:
        items = [{"id": f"s{i}", "label": i % 2, "observed_at": iso(scored[i] + timedelta(days=1))}
                 for i in ids]
        assert client.post("/v1/models/slow/outcomes", json={"outcomes": items}).status_code == 200

    report(range(19))
    refresh(client)
    assert client.get("/v1/models/slow").json()["outcome_delay"]["complete_after_days"] is None
    assert client.get(f"/v1/models/slow/rules/{RULE}").json()["streams"] == []
    report(range(19, 40))
    clock.advance(timedelta(hours=2))  # the delay is measured again at most hourly
    refresh(client)
    # every delay is 1 day; the p95 is read off a grid with 4 % steps
    assert abs(client.get("/v1/models/slow").json()["outcome_delay"]["complete_after_days"] - 1.0) < 0.05
    stream = _stream(client)
    assert stream["consumed"] == 40  # all are older than the 1-day delay; none was skipped
    assert stream["unlabeled_at_maturity"] == 0
