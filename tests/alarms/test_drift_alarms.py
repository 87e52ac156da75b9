"""The default score-drift rule through the API, per week and per segment stream.

Rule (``score-drift-weekly``): fire when a closed week's PSI against the
reference exceeds max(χ²_{1−α, B−1} (1/n + 1/m), 0.1) — the no-shift 1 − α point
of docs/methods.md §17.2 for the week's n and the reference's m, α the rule's
per-test level from the model's budget, floored at the common 0.1 — with at
least 100 predictions. The reference is an uploaded Beta(2,8) validation set;
weeks are Beta(2,8) (no shift) or Beta(4,6) (shifted), with the same volume.
Expected PSI is the docs/methods.md §17.2 formula in numpy on the raw rows
binned at the reference's snapped deciles (``tests.rollup.test_metrics_reference``);
the level is scipy's χ² quantile. Each segment holds half the week, so its
no-shift point exceeds 0.1: the sample-size-aware level decides there.
"""

from __future__ import annotations

import itertools
from datetime import timedelta

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient
from scipy import stats

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, Day, make_day, post_day, refresh, setup_model
from tests.conftest import Database, make_client
from tests.rollup.test_metrics_reference import psi_on, snapped_decile_edges

MIN_N = 100  # the default rule's minimum predictions (kinds.score_drift.DriftParams)
# Each test's level from the model's budget (docs/methods.md §18.5): the two drift rules are the
# only enabled ones, equal weights, so each holds half of one false alarm a year, tested once a
# week (365.25 / 7 a year) on each of the 3 live streams.
LEVEL = 0.5 / (365.25 / 7) / 3
# rule → its PSI floor: the default 0.1, and a rule without a floor, judged by the level alone
RULES = {"score-drift-weekly": 0.1, "score-drift-level-only": 0.0}
# week → (Beta law of the scores, cases per day). Weeks 2 and 4 are too small to judge:
# the first unshifted (an open alarm must stay open), the second shifted (it must not fire).
PLAN = {0: ((2, 8), 40), 1: ((4, 6), 40), 2: ((2, 8), 10), 3: ((2, 8), 40), 4: ((4, 6), 10)}
STREAMS = ("all", "north", "south")


def _post(client: TestClient, rng: np.random.Generator) -> pd.DataFrame:
    rows = []
    for week, (beta, per_day) in PLAN.items():
        for day in range(7 * week, 7 * week + 7):
            d = make_day(rng, day, per_day, beta=beta)
            post_day(client, "d", d)
            rows.append(pd.DataFrame({"scored_at": pd.to_datetime(d.scored_at, utc=True), "p": d.p,
                                      "region": d.region}))
    return pd.concat(rows, ignore_index=True)


def _verdict(reference: np.ndarray, current: np.ndarray, min_psi: float) -> dict:
    """Fire or not by docs/methods.md §17.2 on every snapping the deciles allow; they must agree."""
    if current.size < MIN_N:
        return {"fire": None, "n": current.size}
    seen = []
    for edges in snapped_decile_edges(reference):
        value = psi_on(edges, reference, current)  # source: docs/methods.md §17.2 PSI with ½ per bin, numpy
        # source: docs/methods.md §17.2, no-shift 1 − α point χ²_{1−α,B−1}(1/n + 1/m), scipy.stats.chi2
        null = float(stats.chi2.ppf(1 - LEVEL, edges.size)) * (1 / reference.size + 1 / current.size)
        seen.append((value > max(null, min_psi), value, null))
    assert len({s[0] for s in seen}) == 1, f"verdict depends on the snapping: {seen}"
    fire, value, null = seen[0]
    return {"fire": fire, "psi": value, "null": null, "n": current.size}


def _expected(rows: pd.DataFrame, reference: np.ndarray, min_psi: float) -> dict[tuple[str, int], dict]:
    out = {}
    for week in PLAN:
        lo = pd.Timestamp(T0 + timedelta(days=7 * week))
        part = rows[(rows.scored_at >= lo) & (rows.scored_at < lo + pd.Timedelta(days=7))]
        for stream in STREAMS:
            chosen = part if stream == "all" else part[part.region == stream]
            out[(stream, week)] = _verdict(reference, chosen.p.to_numpy(), min_psi)
    return out


def _alarms(client: TestClient, rule: str, model: str = "d") -> dict[str, dict]:
    r = client.get(f"/v1/models/{model}/alarms", params={"rule": rule})
    assert r.status_code == 200, r.text
    return {(a["segment"] or {"value": "all"})["value"]: a for a in r.json()["alarms"]}


def test_drift_rules_fire_on_a_shifted_week_against_the_size_aware_level_and_resolve(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "d", keep=("score-drift-weekly",))
    r = client.post("/v1/models/d/rules", json={"name": "score-drift-level-only", "kind": "score_drift",
                                               "params": {"min_psi": 0.0}})
    assert r.status_code == 201, r.text
    rng = np.random.default_rng(12)
    reference = rng.beta(2, 8, 2000)
    r = client.post("/v1/models/d/reference", json={
        "probabilities": reference.tolist(), "labels": (rng.random(2000) < reference).astype(int).tolist()})
    assert r.status_code == 200, r.text
    rows = _post(client, rng)
    want = {rule: _expected(rows, reference, floor) for rule, floor in RULES.items()}
    # The constructed weeks say what they should, for both rules on every stream: the shifted
    # week fires, unshifted weeks of the same volume do not, small weeks cannot be judged.
    for rule, stream in itertools.product(RULES, STREAMS):
        assert [want[rule][(stream, w)]["fire"] for w in PLAN] == [False, True, None, False, None]
    # In a segment (half the week) the size-aware point, not the 0.1 floor, is the limit.
    assert all(want["score-drift-weekly"][(s, 1)]["null"] > 0.1 for s in ("north", "south"))

    clock.set(T0 + timedelta(days=22, hours=2))  # weeks 0–2 closed and mature (H = 1 day)
    refresh(client)
    opened = {rule: _alarms(client, rule) for rule in RULES}
    for rule, alarms in opened.items():
        assert set(alarms) == set(STREAMS)  # one alarm per stream, opened by week 1
        for stream, alarm in alarms.items():
            ev, exp = alarm["evidence"], want[rule][(stream, 1)]
            assert alarm["state"] == "open"  # the small week 2 left it as it was
            assert ev["period_start"].startswith("2026-03-09")
            assert ev["n"] == exp["n"]  # pandas row count
            assert abs(ev["statistic"] - exp["psi"]) <= 1e-9 * exp["psi"]  # numpy PSI (docs/methods.md §17.2)
            assert abs(ev["detail"]["null_level"] - exp["null"]) <= 1e-9 * exp["null"]  # scipy χ²
            assert ev["level"] == pytest.approx(LEVEL, rel=1e-12)
            assert ev["budget_share_per_year"] == pytest.approx(0.5)
            assert ev["detail"]["n_reference"] == reference.size

    events = db.scalar("SELECT count(*) FROM outbox_events")
    refresh(client)  # each closed week is judged once
    assert {rule: _alarms(client, rule) for rule in RULES} == opened
    assert db.scalar("SELECT count(*) FROM outbox_events") == events

    clock.set(T0 + timedelta(days=36, hours=2))  # weeks 3 (unshifted) and 4 (small, shifted) mature
    refresh(client)
    for rule in RULES:
        alarms = _alarms(client, rule)
        assert set(alarms) == set(STREAMS)  # the small shifted week 4 opened nothing
        for stream, alarm in alarms.items():
            assert alarm["state"] == "resolved"
            assert alarm["resolution"]["period_start"].startswith("2026-03-23")
            exp = want[rule][(stream, 3)]
            assert abs(alarm["resolution"]["statistic"] - exp["psi"]) <= 1e-9 * exp["psi"]
    n_alarms = len(RULES) * len(STREAMS)
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.opened'") == n_alarms
    assert db.scalar("SELECT count(*) FROM outbox_events WHERE kind = 'alarm.resolved'") == n_alarms


def test_a_segment_value_is_compared_with_its_own_traffic_reference(db: Database) -> None:
    """Segment values with different, stable mixes raise no drift against a traffic reference.

    North scores Beta(4,6) (mean 0.4), south Beta(1,9) (mean 0.1), the same every week. Against
    the pooled reference each half would differ hugely (PSI well above 0.1); against its own
    segment's reference weeks it is an unshifted sample. Then the mix of north moves to
    Beta(1,9): north and the pooled stream fire, south stays quiet.
    """
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    reference = {"kind": "traffic", "start": "2026-03-02T00:00:00Z", "end": "2026-03-16T00:00:00Z"}
    setup_model(client, "s", keep=("score-drift-weekly",), reference=reference)
    rng = np.random.default_rng(21)
    for day in range(35):
        d = make_day(rng, day, 120)
        north = np.array([r == "north" for r in d.region])
        moved = day >= 28
        d.p = np.where(north, rng.beta(1, 9, d.p.size) if moved else rng.beta(4, 6, d.p.size),
                       rng.beta(1, 9, d.p.size))
        d.y = (rng.random(d.p.size) < d.p).astype(int)
        post_day(client, "s", Day(d.day, d.ids, d.p, d.y, d.region, d.scored_at))
    clock.set(T0 + timedelta(days=36, hours=2))
    refresh(client)
    opened = {(a["segment"] or {"value": "all"})["value"]: a["evidence"]["period_start"][:10]
              for a in _alarms(client, "score-drift-weekly", "s").values()}
    assert opened == {"north": "2026-03-30", "all": "2026-03-30"}
