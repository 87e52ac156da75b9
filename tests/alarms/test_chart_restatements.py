"""A chart alarm under implicit negatives is restated when late events land on its run.

The south segment's odds triple from day 2 (Steiner et al. 2000 odds shift), and a
quarter of its events from then on are held back: the chart reads those cases as 0 once
horizon + lag pass. After the upper chart's alarm opens, the held-back events are
reported and two events on the run are corrected to non-events. The alarm keeps its
evidence; GET of it shows one restatement. Expected values come from the chart's weight
W = y ln R − ln(1 − r + R r) (Steiner et al. 2000): a 0 read as 1 adds ln R whatever r,
a 1 corrected to 0 takes ln R away; the run is the cases from the hour of the chart
path's last point at S = 0 to the crossing case (docs/methods.md §23), counted here from
what the test posted.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta

import numpy as np
import pytest

from calibrant.clock import FixedClock
from tests.alarms.streams import T0, iso, make_day, refresh, setup_model
from tests.conftest import Database, make_client

RULE = "calibration-chart-upper"
SMALL_DESIGN = {"min_design_cases": 400, "design_sample": 800}
HOUR = timedelta(hours=1)


def _post(client, path: str, key: str, items: list[dict]) -> dict:
    r = client.post(f"/v1/models/m/{path}", json={key: items})
    assert r.status_code == 200, r.text
    return r.json()


def test_late_events_and_corrections_on_the_run_restate_a_chart_alarm(db: Database) -> None:
    clock = FixedClock(T0)
    client = make_client(db, clock=clock)
    setup_model(client, "m", keep=(RULE,), chart_params=SMALL_DESIGN, implicit_negatives=True)
    rng = np.random.default_rng(7)
    rows: list[tuple[str, datetime, float, int, str]] = []  # id, scored, p, y, region
    held: set[str] = set()
    for day in range(10):
        d = make_day(rng, day, 240, shift_from=2, odds_ratio=3.0)
        _post(client, "predictions", "predictions",
              [{"id": i, "probability": float(p), "scored_at": iso(t), "tags": {"region": r}}
               for i, p, t, r in zip(d.ids, d.p, d.scored_at, d.region, strict=True)])
        events = [k for k in range(len(d.ids)) if d.y[k] == 1]
        hold = {d.ids[k] for n, k in enumerate(events) if day >= 2 and d.region[k] == "south" and n % 4 == 0}
        _post(client, "outcomes", "outcomes",
              [{"id": d.ids[k], "label": 1, "observed_at": iso(d.scored_at[k] + timedelta(hours=6))}
               for k in events if d.ids[k] not in hold])
        held |= hold
        rows += list(zip(d.ids, d.scored_at, d.p.tolist(), d.y.tolist(), d.region, strict=True))
        clock.set(T0 + timedelta(days=day + 2, hours=1))  # the day's cases mature after H = 1 day
        if day % 2:
            refresh(client)
    alarms = client.get("/v1/models/m/alarms", params={"rule": RULE, "tag": "region:south"}).json()["alarms"]
    assert len(alarms) == 1
    alarm = alarms[0]
    ev = alarm["evidence"]

    path = ev["chart_path"]
    zeros = [t for t, s in path[:-1] if s <= 0.0]
    # S may have stayed above 0 over the whole kept path: the run is then cut at its first point
    run_start = datetime.fromisoformat(zeros[-1] if zeros else path[0][0])
    crossed = datetime.fromisoformat(ev["crossed_at"])

    def on_run(case_id: str, scored: datetime) -> bool:
        matured = scored.replace(minute=0, second=0, microsecond=0) + HOUR + timedelta(days=1)
        return run_start <= matured and (matured, case_id) <= (crossed, ev["crossing_case"])

    south = [r for r in rows if r[4] == "south"]
    late = [r for r in south if r[0] in held and on_run(r[0], r[1])]
    fixed = [r for r in south if r[3] == 1 and r[0] not in held and on_run(r[0], r[1])][:2]
    assert late
    assert len(fixed) == 2

    # A non-event reported for a case the chart read as 0 changes nothing: no entry.
    quiet = next(r for r in south if r[3] == 0 and on_run(r[0], r[1]))
    clock.advance(timedelta(hours=12))
    _post(client, "outcomes", "outcomes", [{"id": quiet[0], "label": 0, "observed_at": iso(clock.now())}])
    refresh(client)
    assert client.get(f"/v1/models/m/alarms/{alarm['id']}").json()["restatements"] == []

    clock.advance(timedelta(hours=12))
    later = clock.now()
    _post(client, "outcomes", "outcomes",
          [{"id": r[0], "label": 1, "observed_at": iso(later)} for r in rows if r[0] in held])
    done = _post(client, "outcomes", "outcomes",
                 [{"id": r[0], "label": 0, "observed_at": iso(later)} for r in fixed])
    assert done["corrected"] == 2
    refresh(client)

    got = client.get(f"/v1/models/m/alarms/{alarm['id']}").json()
    assert got["evidence"] == ev  # what the chart saw, kept
    assert len(got["restatements"]) == 1
    entry = got["restatements"][0]
    assert entry["late_labels"] == len(late)
    assert entry["corrected_labels"] == 2
    assert entry["changed_cases"] == len(late) + 2
    assert entry["events_added"] == len(late) - 2
    assert entry["statistic"] == pytest.approx(ev["statistic"] + (len(late) - 2) * math.log(2.0), abs=1e-9)
    assert entry["n"] == ev["n"]  # read as 0 then, read as 1 now: no case added
    assert entry["still_crosses"] is True
    assert entry["at"] == iso(later)
    assert entry["run_start"] == iso(run_start)
    assert entry["run_truncated"] is (not zeros)

    # Nothing new: no new entry. A further correction on the run: a second entry, counted from the alarm.
    clock.advance(timedelta(hours=2))
    refresh(client)
    assert len(client.get(f"/v1/models/m/alarms/{alarm['id']}").json()["restatements"]) == 1
    back = late[0]
    _post(client, "outcomes", "outcomes", [{"id": back[0], "label": 0, "observed_at": iso(clock.now())}])
    refresh(client)
    entries = client.get(f"/v1/models/m/alarms/{alarm['id']}").json()["restatements"]
    assert len(entries) == 2
    assert entries[0] == entry
    assert entries[1]["changed_cases"] == len(late) + 1  # that case reads 0 again, as when the alarm opened
    restated = ev["statistic"] + (len(late) - 3) * math.log(2.0)
    assert entries[1]["statistic"] == pytest.approx(restated, abs=1e-9)
