"""The public contract, walked: every JSON response and every webhook body of a small seeded service.

A model whose odds shift for one day in one segment opens chart and window
alarms; feed silence opens a model-wide one; a person resolves the segment's
chart alarm. Every document the service hands out on the way is walked
and each offender is named by its JSON path:

- a time that is not RFC 3339 in UTC ending in ``Z``;
- a count that is not a JSON integer (null, float);
- a name the service no longer uses, as a key or a string value.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

import httpx
import numpy as np
from fastapi.testclient import TestClient

from calibrant.app import create_app
from calibrant.clock import FixedClock
from calibrant.notify.senders import RecordingSender
from tests.alarms.streams import T0, Day, iso, post_day, post_outcomes, refresh
from tests.conftest import REPLAY_TOLERANCE_HOURS, Database
from tests.notify.helpers import loopback_resolver

MODEL = "walk"
UPPER, DAILY, STARVATION = "calibration-chart-upper", "excess-log-loss-daily", "feed-starvation"
# Each chart design solves Markov chains for about a second, so only two streams ever get one:
# "all" and south (90 cases a day); north (30 a day) never reaches the design minimum.
DAYS, PER_DAY, SHIFT_DAY, ODDS_RATIO = 4, 120, 2, 4.0
SMALL_DESIGN = {"min_design_cases": 200, "design_sample": 200}  # the smallest the rule accepts
SEED = 20

TIME = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(?:\.\d+)?")
# Keys whose value counts things, so it is always a JSON integer: never null, never a float.
# Every key starting with COUNT_PREFIX is one too (n_predictions, n_labeled, n_immature, n_charts ...),
# and so are MODEL_COUNT_KEYS inside a model's "counts". "n" is the cases a statistic rests on,
# "mature" the mature predictions the starvation rule counted. A measured quantity that may be
# fractional (a rate, a share, a statistic, cases_per_day) must not be listed here.
COUNT_KEYS = frozenset({
    "count", "accepted", "duplicates", "corrected", "crossing_count", "consumed", "skipped_late",
    "unlabeled_at_maturity", "cases_since_reset", "consecutive_failures", "pending", "due", "n", "mature",
})
COUNT_PREFIX = "n_"
MODEL_COUNT_KEYS = frozenset({"predictions", "outcomes", "labeled"})
# Names the service stopped using. A key that is one or has one as a word (fired_at), or a string
# value naming one, is an offender; "labelled" also inside longer keys and text (min_labelled,
# "labelled predictions").
OLD_NAMES = frozenset({"insufficient_data", "fired", "firings", "event_kinds", "event_type",
                       # retired with the one false-alarm budget per model (CHANGELOG)
                       "expected_false_alarms_per_year", "budget_per_year", "max_unlabeled_share",
                       "unlabeled_share", "outcomes_missing"})
OLD_KEY_WORDS = frozenset({"fired", "firings"})
OLD_WORDS = re.compile(r"\b(insufficient_data|firings|fired|event_kinds|event_type)\b|labelled")
OLD_SYMBOL_KEYS = frozenset({"s", "h"})  # the chart's symbols, now cusum_statistic / control_limit
OLD_STATES = frozenset({"ok", "undefined"})  # metric states, now measured / too_few_cases / no_value
HEALTH_OK_PATHS = frozenset({"$.status", "$.database"})  # /healthz keeps "ok" in exactly these


@dataclass
class Walk:
    """What a walk saw, and every offender: (document and JSON path, problem, the value)."""

    offenders: list[tuple[str, str, str]] = field(default_factory=list)
    times: int = 0
    counts: int = 0
    states: set[str] = field(default_factory=set)  # every value seen under a "state" key

    def document(self, source: str, doc: Any, *, ok_paths: frozenset[str] = frozenset()) -> None:
        for path, parent_key, key, value in _nodes(doc, "$", None):
            where = f"{source} {path}"
            if key is not None:
                self._key(where, key)
            if isinstance(value, str):
                self._string(where, value, key, path in ok_paths)
                if key == "state":
                    self.states.add(value)
            if key is not None and _is_count(key, parent_key):
                self.counts += 1
                if type(value) is not int:
                    self._offend(where, "count not an integer", value)

    def report(self) -> str:
        return f"{len(self.offenders)} offenders:\n" + "\n".join(
            f"{where}: {problem}: {shown}" for where, problem, shown in self.offenders)

    def _offend(self, where: str, problem: str, value: Any) -> None:
        self.offenders.append((where, problem, json.dumps(value)))

    def _key(self, where: str, key: str) -> None:
        if (key in OLD_SYMBOL_KEYS or key in OLD_NAMES or OLD_WORDS.search(key)
                or OLD_KEY_WORDS & set(key.split("_"))):
            self._offend(where, "old key", key)
        self._times(where + " (key)", key)

    def _string(self, where: str, value: str, key: str | None, ok_allowed: bool) -> None:
        self._times(where, value)
        if value in OLD_STATES and not (value == "ok" and ok_allowed):
            self._offend(where, "old state", value)
        elif value in OLD_NAMES or OLD_WORDS.search(value):
            self._offend(where, "old name", value)
        if key == "version" and value == "*":
            self._offend(where, "'*' as a version", value)

    def _times(self, where: str, text: str) -> None:
        for match in TIME.finditer(text):
            self.times += 1
            if not text[match.end():].startswith("Z"):
                self._offend(where, "time not ending in Z", text)


def _is_count(key: str, parent_key: str | None) -> bool:
    return key in COUNT_KEYS or key.startswith(COUNT_PREFIX) or (
        parent_key == "counts" and key in MODEL_COUNT_KEYS)


def _nodes(value: Any, path: str, key: str | None, parent_key: str | None = None
           ) -> Iterator[tuple[str, str | None, str | None, Any]]:
    """(path, key of the enclosing object, own key, value) for every node; list items keep the list's key."""
    yield path, parent_key, key, value
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _nodes(v, f"{path}.{k}", k, key)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _nodes(v, f"{path}[{i}]", None, key)


# ----------------------------------------------------------------------------- the walker itself
def test_the_walk_names_each_kind_of_offender_by_its_path() -> None:
    walk = Walk()
    walk.document("doc", {
        "opened_at": "2026-03-02T00:00:00+00:00", "path": [["2026-03-02T01:00:00.5Z", 1.0]],
        "count": 3.0, "n_labeled": None, "counts": {"labeled": 2.0, "predictions": 4}, "skipped_late": 1,
        "cusum": {"s": 0.1, "h": 4.2}, "params": {"min_labelled": 200}, "fired": 1, "fired_at": 0,
        "metrics": {"state": "ok"}, "other": {"state": "undefined"}, "version": "*",
        "events": ["event_type"], "summary": "200 labelled predictions",
        "rate": 0.5, "statistic": 2.0, "n": 2.5,
    })
    expected = {
        ("doc $.opened_at", "time not ending in Z"), ("doc $.count", "count not an integer"),
        ("doc $.n_labeled", "count not an integer"), ("doc $.counts.labeled", "count not an integer"),
        ("doc $.cusum.s", "old key"), ("doc $.cusum.h", "old key"), ("doc $.params.min_labelled", "old key"),
        ("doc $.fired", "old key"), ("doc $.metrics.state", "old state"), ("doc $.other.state", "old state"),
        ("doc $.version", "'*' as a version"), ("doc $.events[0]", "old name"), ("doc $.summary", "old name"),
        ("doc $.n", "count not an integer"), ("doc $.fired_at", "old key"),
    }
    assert {(where, problem) for where, problem, _ in walk.offenders} == expected, walk.report()
    assert len(walk.offenders) == len(expected)  # one offender per node and problem
    assert (walk.times, walk.counts) == (2, 6)  # rate and statistic are not counts
    health = Walk()
    health.document("healthz", {"status": "ok", "database": "ok", "detail": {"state": "ok"}},
                    ok_paths=HEALTH_OK_PATHS)
    assert health.offenders == [("healthz $.detail.state", "old state", '"ok"')]


# ----------------------------------------------------------------------------- the seeded service
def _client(db: Database, clock: FixedClock, sender: RecordingSender,
            responses: list[tuple[str, httpx.Response]]) -> TestClient:
    """The app with a recording webhook sender (hence create_app, not make_client); every
    response it gives is kept for the walk."""
    app = create_app(db.settings(webhook_allow_private=True, future_tolerance_hours=REPLAY_TOLERANCE_HOURS),
                     engine=db.engine, clock=clock,
                     webhook_sender=sender, resolver=loopback_resolver)

    def keep(response: httpx.Response) -> None:
        response.read()
        responses.append((f"{response.request.method} {response.request.url.path}", response))

    client = TestClient(app)
    client.event_hooks = {"request": [], "response": [keep]}  # httpx's hook: sees every response
    return client


def _ok(response: httpx.Response) -> Any:
    assert response.status_code < 300, response.text
    return response.json()


def _day(rng: np.random.Generator, day: int) -> Day:
    """Beta(2, 8) risks, three cases in four from south; on SHIFT_DAY south's true odds are
    ODDS_RATIO times the model's: q = OR p / (1 − p + OR p) (Steiner et al. 2000)."""
    p = rng.beta(2, 8, PER_DAY)
    region = ["north" if i % 4 == 0 else "south" for i in range(PER_DAY)]
    shifted = np.array([day == SHIFT_DAY and r == "south" for r in region])
    q = np.where(shifted, ODDS_RATIO * p / (1 - p + ODDS_RATIO * p), p)
    seconds = np.sort(rng.integers(0, 86400, PER_DAY))
    scored = [T0 + timedelta(days=day, seconds=int(s)) for s in seconds]
    return Day(day, [f"c{day}-{i}" for i in range(PER_DAY)], p, (rng.random(PER_DAY) < q).astype(int),
               region, scored)


def _seed(client: TestClient, clock: FixedClock) -> None:
    """Model, rules, a receiver, four days of cases, one refresh."""
    _ok(client.put(f"/v1/models/{MODEL}", json={"outcome_horizon_days": 1, "segment_keys": ["region"]}))
    for rule in _ok(client.get(f"/v1/models/{MODEL}/rules"))["rules"]:
        change: dict = {"enabled": rule["name"] in (UPPER, STARVATION)}
        if rule["kind"] == "calibration_chart":
            change["params"] = SMALL_DESIGN
        _ok(client.put(f"/v1/models/{MODEL}/rules/{rule['name']}", json=change))
    _ok(client.post(f"/v1/models/{MODEL}/rules", json={
        "name": DAILY, "kind": "excess_log_loss",
        "params": {"granularity": "day", "min_labeled": 50, "min_per_class": 5}}))
    _ok(client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "model": MODEL}))
    rng = np.random.default_rng(SEED)
    days = [_day(rng, day) for day in range(DAYS)]
    for d in days:
        post_day(client, MODEL, d)
    post_day(client, MODEL, days[0], outcomes=False)  # the same predictions again: duplicates
    post_outcomes(client, MODEL, days[0], range(2))  # the same outcomes again: duplicates
    first = days[0]
    flipped = [{"id": first.ids[2], "label": 1 - int(first.y[2]),
                "observed_at": iso(first.scored_at[2] + timedelta(hours=7))}]
    _ok(client.post(f"/v1/models/{MODEL}/outcomes", json={"outcomes": flipped}))  # corrected
    # Every day matured (H = 1 day) and the feed silent for more than 24 h: starvation opens too.
    clock.set(T0 + timedelta(days=DAYS + 1, hours=1))
    refresh(client)


def _read_everything(client: TestClient, hook: int) -> dict[str, Any]:
    """GET every read endpoint; returns the documents the vacuity checks look into."""
    m = f"/v1/models/{MODEL}"
    span = {"start": iso(T0), "end": iso(T0 + timedelta(days=DAYS + 1))}
    _ok(client.get("/healthz"))
    _ok(client.get("/v1/models"))
    _ok(client.get(m))
    _ok(client.get(f"{m}/cases/c{SHIFT_DAY}-1"))
    for params in ({"granularity": "week"}, {"granularity": "month"}, {"window": "28d"},
                   {"version": "default"}, {"tag": "region:south"}, {"tag": "region:north"}, {}):
        _ok(client.get(f"{m}/metrics", params={**span, "granularity": "day", **params}))
    for params in ({"strategy": "uniform", "bins": 10}, {"strategy": "quantile", "bins": 5}):
        _ok(client.get(f"{m}/reliability", params={**span, **params}))
    _ok(client.get(f"{m}/rules"))
    _ok(client.get(f"{m}/rules/{UPPER}"))
    _ok(client.get(f"{m}/rules/{DAILY}"))
    _ok(client.get(f"{m}/rules/{STARVATION}"))
    alarms = _ok(client.get(f"{m}/alarms"))["alarms"]
    for alarm in alarms:
        _ok(client.get(f"{m}/alarms/{alarm['id']}"))
    backtests = {rule: _ok(client.post(f"{m}/rules/{rule}/backtest", params=span)) for rule in (UPPER, DAILY)}
    _ok(client.get("/v1/webhooks"))
    _ok(client.get(f"/v1/webhooks/{hook}"))
    deliveries = _ok(client.get(f"/v1/webhooks/{hook}/deliveries"))["deliveries"]
    _ok(client.get("/v1/audit"))
    _ok(client.get("/v1/audit", params={"model": MODEL, "limit": 2, **span}))
    _ok(client.get(f"{m}/history"))
    _ok(client.get(f"{m}/report", params=span))
    return {"alarms": alarms, "backtests": backtests, "deliveries": deliveries}


def test_every_response_and_webhook_body_keeps_the_contract(db: Database) -> None:
    clock = FixedClock(T0)
    sender = RecordingSender()
    responses: list[tuple[str, httpx.Response]] = []
    client = _client(db, clock, sender, responses)
    _seed(client, clock)

    alarms = _ok(client.get(f"/v1/models/{MODEL}/alarms", params={"rule": UPPER}))["alarms"]
    south = next(a for a in alarms if a["segment"] == {"key": "region", "value": "south"})
    _ok(client.post(f"/v1/models/{MODEL}/alarms/{south['id']}/resolve", json={"note": "looked at it"}))
    clock.advance(timedelta(minutes=5))
    refresh(client)  # delivers alarm.resolved
    hook = _ok(client.get("/v1/webhooks"))["webhooks"][0]["id"]
    _ok(client.post(f"/v1/webhooks/{hook}/ping"))
    seen = _read_everything(client, hook)

    walk = Walk()
    for source, response in responses:
        assert response.status_code < 300, f"{source}: {response.text}"
        if response.status_code == 204:
            continue
        ok_paths = HEALTH_OK_PATHS if source == "GET /healthz" else frozenset()
        walk.document(source, response.json(), ok_paths=ok_paths)
    bodies = [json.loads(request.body) for request in sender.requests]
    for i, body in enumerate(bodies):
        walk.document(f"webhook #{i} ({body['type']})", body)

    # The walk is not vacuous: it saw alarms of every sort, their webhooks, crossings and deliveries.
    rules_alarmed = {a["rule"] for a in seen["alarms"]}
    assert {UPPER, DAILY, STARVATION} <= rules_alarmed, rules_alarmed
    model_wide = [a for a in seen["alarms"] if a["rule"] == STARVATION]
    assert [(a["version"], a["scope"]) for a in model_wide] == [(None, "all_versions")]
    assert {b["type"] for b in bodies} == {"alarm.opened", "alarm.resolved", "ping"}
    assert any(b["data"].get("scope") == "all_versions" for b in bodies)
    assert all(bt["crossing_count"] >= 1 for bt in seen["backtests"].values()), seen["backtests"]
    assert len(seen["deliveries"]) == len(bodies)
    # Metric states (north's 30 a day are too few for some metrics), alarm and delivery states.
    expected_states = {"measured", "too_few_cases", "no_value", "open", "resolved", "delivered"}
    assert expected_states <= walk.states, walk.states
    assert walk.times > 50, walk.times
    assert walk.counts > 50, walk.counts
    assert not walk.offenders, walk.report()
