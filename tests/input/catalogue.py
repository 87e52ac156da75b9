"""The catalogue of bad and extreme inputs: each a request, the status it must get and, for a
4xx, the field its problem document must name.

The state they run against (``SEEDED``: one model with traffic, its rules, one webhook) is
built by ``test_bad_inputs.seed``; the clock stands at ``NOW``.
"""

from __future__ import annotations

import gzip
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

NOW = datetime(2026, 6, 1, tzinfo=UTC)
SEEDED = "seeded"
FRESH = "fresh-model"  # never created by any case
JSON = {"content-type": "application/json"}
INT32_OVER = 2**31
INT64_OVER = 2**63
BEYOND_64_BITS = 2**70


@dataclass(frozen=True)
class BadInput:
    name: str
    method: str
    path: str
    status: int
    json: Any = None
    content: bytes | None = None
    headers: dict[str, str] = field(default_factory=dict)
    params: dict[str, str] | None = None
    names_field: str | None = None  # the field a 422's errors must name


def _prediction(**changes: Any) -> dict[str, Any]:
    item = {"id": "new-1", "probability": 0.3, "scored_at": "2026-05-20T10:00:00Z"}
    item.update(changes)
    return item


def _outcome(**changes: Any) -> dict[str, Any]:
    item = {"id": "c1", "label": 1, "observed_at": "2026-05-21T10:00:00Z"}
    item.update(changes)
    return item


def predictions(name: str, status: int, names_field: str | None = None, model: str = SEEDED,
                **changes: Any) -> BadInput:
    return BadInput(name, "POST", f"/v1/models/{model}/predictions", status,
                    json={"predictions": [_prediction(**changes)]}, names_field=names_field)


def outcomes(name: str, status: int, names_field: str | None = None, **changes: Any) -> BadInput:
    return BadInput(name, "POST", f"/v1/models/{SEEDED}/outcomes", status,
                    json={"outcomes": [_outcome(**changes)]}, names_field=names_field)


BODY = b'{"predictions": [{"id": "new-1", "probability": 0.3, "scored_at": "2026-05-20T10:00:00Z"}]}'
PREDICTIONS_PATH = f"/v1/models/{SEEDED}/predictions"

CASES: list[BadInput] = [
    # Time bounds (default window: 2000-01-01 to one day after the clock).
    predictions("scored_at in 9999", 422, "scored_at", scored_at="9999-12-31T23:59:59Z"),
    predictions("scored_at in year 1", 422, "scored_at", scored_at="0001-01-01T00:00:00Z"),
    predictions("scored_at before year 1 once in UTC", 422, "scored_at",
                scored_at="0001-01-01T00:00:00+01:00"),
    predictions("scored_at after 9999 once in UTC", 422, "scored_at",
                scored_at="9999-12-31T23:59:59-01:00"),
    predictions("scored_at in 2099", 422, "scored_at", scored_at="2099-01-01T00:00:00Z"),
    predictions("scored_at just before 2000", 422, "scored_at", scored_at="1999-12-31T23:59:59Z"),
    predictions("scored_at a second past the tolerance", 422, "scored_at",
                scored_at="2026-06-02T00:00:01Z"),
    predictions("scored_at in 9999 creates no model", 422, "scored_at", model=FRESH,
                scored_at="9999-12-31T00:00:00Z"),
    outcomes("observed_at in 9999", 422, "observed_at", observed_at="9999-12-31T23:59:59Z"),
    outcomes("observed_at in 1970", 422, "observed_at", observed_at="1970-01-01T00:00:00Z"),
    outcomes("observed_at before year 1 once in UTC", 422, "observed_at",
             observed_at="0001-01-01T00:30:00+01:00"),
    outcomes("observed_at in 2099", 422, "observed_at", observed_at="2099-06-01T00:00:00Z"),
    outcomes("occurred_at in 1970", 422, "occurred_at", occurred_at="1970-01-01T00:00:00Z"),
    outcomes("occurred_at in 9999", 422, "occurred_at", occurred_at="9999-12-31T23:59:59Z"),
    outcomes("occurred_at after observed_at", 422, "occurred_at", occurred_at="2026-05-22T10:00:00Z"),
    outcomes("occurred_at without an offset", 422, "occurred_at", occurred_at="2026-05-20T10:00:00"),
    # Content types: only application/json bodies, as is or gzip.
    BadInput("text/plain body", "POST", PREDICTIONS_PATH, 415, content=BODY,
             headers={"content-type": "text/plain"}),
    BadInput("form-encoded body", "POST", PREDICTIONS_PATH, 415, content=b"predictions=1",
             headers={"content-type": "application/x-www-form-urlencoded"}),
    BadInput("multipart body", "POST", PREDICTIONS_PATH, 415, content=BODY,
             headers={"content-type": "multipart/form-data; boundary=x"}),
    BadInput("body without a content type", "POST", PREDICTIONS_PATH, 415, content=BODY),
    BadInput("a JSON look-alike media type", "POST", PREDICTIONS_PATH, 415, content=BODY,
             headers={"content-type": "text/json"}),
    BadInput("an unknown content encoding", "POST", PREDICTIONS_PATH, 415, content=BODY,
             headers={**JSON, "content-encoding": "br"}),
    BadInput("a gzip body that is not gzip", "POST", PREDICTIONS_PATH, 422, content=BODY,
             headers={**JSON, "content-encoding": "gzip"}, names_field="body"),
    BadInput("a gzip body cut short", "POST", PREDICTIONS_PATH, 422, content=gzip.compress(BODY)[:-12],
             headers={**JSON, "content-encoding": "gzip"}, names_field="body"),
    BadInput("a gzip body inflating past the cap", "POST", PREDICTIONS_PATH, 413,
             content=gzip.compress(b" " * (17 * 1024 * 1024)), headers={**JSON, "content-encoding": "gzip"}),
    BadInput("webhook as text/plain", "POST", "/v1/webhooks", 415,
             content=b'{"url": "http://127.0.0.1:9/x"}', headers={"content-type": "text/plain"}),
    BadInput("rule as a form", "POST", f"/v1/models/{SEEDED}/rules", 415, content=b"name=x&kind=y",
             headers={"content-type": "application/x-www-form-urlencoded"}),
    BadInput("model settings as text/plain", "PUT", f"/v1/models/{FRESH}", 415,
             content=b'{"description": "x"}', headers={"content-type": "text/plain"}),
    # Ids out of range: no such row, so 404 (never a database error).
    BadInput("webhook id beyond 32 bits", "GET", f"/v1/webhooks/{INT32_OVER}", 404),
    BadInput("webhook id beyond 64 bits", "GET", f"/v1/webhooks/{BEYOND_64_BITS}", 404),
    BadInput("delete webhook id beyond 64 bits", "DELETE", f"/v1/webhooks/{BEYOND_64_BITS}", 404),
    BadInput("change webhook id 2**63", "PUT", f"/v1/webhooks/{INT64_OVER}", 404,
             json={"description": "x"}),
    BadInput("deliveries of a webhook id below -2**63", "GET",
             f"/v1/webhooks/-{BEYOND_64_BITS}/deliveries", 404),
    BadInput("ping webhook id beyond 64 bits", "POST", f"/v1/webhooks/{BEYOND_64_BITS}/ping", 404),
    BadInput("alarm id beyond 64 bits", "GET", f"/v1/models/{SEEDED}/alarms/{BEYOND_64_BITS}", 404),
    BadInput("resolve alarm id 2**63", "POST", f"/v1/models/{SEEDED}/alarms/{INT64_OVER}/resolve", 404,
             json={"note": "x"}),
    # Null fields.
    BadInput("webhook url null", "PUT", "/v1/webhooks/1", 422, json={"url": None}, names_field="url"),
    BadInput("webhook types null", "PUT", "/v1/webhooks/1", 422, json={"types": None}, names_field="types"),
    BadInput("webhook description null", "PUT", "/v1/webhooks/1", 422, json={"description": None},
             names_field="description"),
    predictions("prediction id null", 422, "id", id=None),
    predictions("probability null", 422, "probability", probability=None),
    outcomes("label null", 422, "label", label=None),
    outcomes("observed_at null", 422, "observed_at", observed_at=None),
    # NUL characters: one 422 on both databases.
    predictions("NUL in a case id", 422, "id", id="a\x00b"),
    predictions("NUL in a version", 422, "version", version="v\x00"),
    predictions("NUL in a tag value", 422, "tags.region", tags={"region": "no\x00rth"}),
    outcomes("NUL in an outcome id", 422, "id", id="\x00"),
    BadInput("NUL in a webhook description", "PUT", "/v1/webhooks/1", 422,
             json={"description": "a\x00"}, names_field="description"),
    BadInput("NUL in a model description", "PUT", f"/v1/models/{FRESH}", 422,
             json={"description": "a\x00"}, names_field="description"),
    BadInput("NUL in a rule's parameters", "POST", f"/v1/models/{SEEDED}/rules", 422,
             json={"name": "x", "kind": "metric_threshold", "params": {"metric": "brier\x00"}},
             names_field="params.metric"),
    BadInput("NUL in a case id in the path", "GET", f"/v1/models/{SEEDED}/cases/c%001", 422,
             names_field="path"),
    BadInput("NUL in a query parameter", "GET", f"/v1/models/{SEEDED}/metrics", 422,
             params={"start": "2026-05-01T00:00:00Z", "end": "2026-06-01T00:00:00Z", "version": "v\x00"},
             names_field="version"),
    BadInput("NUL in an alarm filter", "GET", f"/v1/models/{SEEDED}/alarms", 422,
             params={"rule": "\x00"}, names_field="rule"),
    # Empty batches: a no-op that creates nothing.
    BadInput("empty prediction batch for a new model", "POST", f"/v1/models/{FRESH}/predictions", 200,
             json={"predictions": []}),
    BadInput("empty outcome batch for a new model", "POST", f"/v1/models/{FRESH}/outcomes", 200,
             json={"outcomes": []}),
    # Bounded work: refused before any period is built.
    BadInput("metrics for 100,000 days", "GET", f"/v1/models/{SEEDED}/metrics", 422,
             params={"start": "1900-01-01T00:00:00Z", "end": "2173-10-16T00:00:00Z", "granularity": "day"},
             names_field="start"),
    BadInput("metrics from year 1", "GET", f"/v1/models/{SEEDED}/metrics", 422,
             params={"start": "0001-01-01T00:00:00Z", "end": "2026-01-01T00:00:00Z"}, names_field="start"),
    BadInput("metrics to the end of 9999", "GET", f"/v1/models/{SEEDED}/metrics", 422,
             params={"start": "2026-01-01T00:00:00Z", "end": "9999-12-31T23:59:59-01:00"},
             names_field="end"),
    BadInput("reliability to the end of 9999", "GET", f"/v1/models/{SEEDED}/reliability", 422,
             params={"start": "2026-01-01T00:00:00Z", "end": "9999-12-31T23:59:59Z"}, names_field="end"),
    BadInput("backtest of a weekly rule over a century", "POST",
             f"/v1/models/{SEEDED}/rules/excess-log-loss-weekly/backtest", 422,
             params={"start": "1926-01-01T00:00:00Z", "end": "2026-01-01T00:00:00Z"}, names_field="start"),
    BadInput("a batch over the item cap", "POST", PREDICTIONS_PATH, 422,
             json={"predictions": [_prediction(id=f"n{i}") for i in range(10_001)]},
             names_field="predictions"),
    BadInput("a traffic reference from year 1", "PUT", f"/v1/models/{SEEDED}", 422,
             json={"reference": {"kind": "traffic", "start": "0001-01-01T00:00:00Z",
                                 "end": "2026-01-01T00:00:00Z"}}, names_field="reference.start"),
    BadInput("a traffic reference to the end of 9999", "PUT", f"/v1/models/{SEEDED}", 422,
             json={"reference": {"kind": "traffic", "start": "2026-01-01T00:00:00Z",
                                 "end": "9999-12-31T23:59:59Z"}}, names_field="reference.end"),
    BadInput("a rule weight that underflows", "POST", f"/v1/models/{SEEDED}/rules", 422,
             json={"name": "tiny", "kind": "excess_log_loss", "params": {"budget_weight": 1e-300}},
             names_field="params.budget_weight"),
    BadInput("a false-alarm budget that underflows", "PUT", f"/v1/models/{SEEDED}", 422,
             json={"false_alarms_per_year": 1e-300}, names_field="false_alarms_per_year"),
]
