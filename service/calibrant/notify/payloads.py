"""The JSON bodies webhooks carry: one envelope, and the ``data`` of each event kind.

Envelope (the shape the Standard Webhooks scheme recommends)::

    {"type": "alarm.opened", "timestamp": "2026-12-02T10:00:00Z", "data": {...}}

``timestamp`` is when the event happened (RFC 3339, UTC); the
``webhook-timestamp`` header is when an attempt was made, and differs on
retries while the body does not.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any
from urllib.parse import quote, urlencode

import orjson

from calibrant.clock import rfc3339

ALARM_OPENED = "alarm.opened"
ALARM_RESOLVED = "alarm.resolved"
PING = "ping"
# Kinds a target can subscribe to; a ping goes to the one target that asked for it.
SUBSCRIBABLE_TYPES = (ALARM_OPENED, ALARM_RESOLVED)
EVENT_TYPES = (*SUBSCRIBABLE_TYPES, PING)


def envelope(kind: str, at: datetime, data: dict[str, Any]) -> bytes:
    """The exact body bytes of an event (sorted keys, so equal data gives equal bytes)."""
    if kind not in EVENT_TYPES:
        raise ValueError(f"unknown event kind {kind!r}; known: {', '.join(EVENT_TYPES)}")
    document = {"type": kind, "timestamp": rfc3339(at), "data": data}
    return orjson.dumps(document, option=orjson.OPT_SORT_KEYS | orjson.OPT_UTC_Z)


def metrics_query(
    model: str,
    *,
    start: datetime,
    end: datetime,
    granularity: str = "day",
    version: str | None = None,
    segment: tuple[str, str] | None = None,
    window_days: int | None = None,
) -> str:
    """The path and query of ``GET /v1/models/{model}/metrics`` that shows an alarm's evidence."""
    params: list[tuple[str, str]] = [
        ("start", rfc3339(start)),
        ("end", rfc3339(end)),
        ("granularity", granularity),
    ]
    if window_days is not None:
        params.append(("window", f"{window_days}d"))
    if version is not None:
        params.append(("version", version))
    if segment is not None:
        params.append(("tag", f"{segment[0]}:{segment[1]}"))
    return f"/v1/models/{quote(model, safe='')}/metrics?{urlencode(params)}"


def alarm_data(
    *,
    alarm_id: int | str,
    rule: str,
    state: str,
    model: str,
    version: str | None,
    segment: tuple[str, str] | None,
    evidence: dict[str, Any],
    metrics_query: str,
    opened_at: datetime,
    resolved_at: datetime | None = None,
    summary: str = "",
) -> dict[str, Any]:
    """``data`` of ``alarm.opened`` / ``alarm.resolved``.

    ``evidence`` is what the rule saw (statistic, interval, n, window or chart
    path); ``version`` is None for a model-wide alarm (``scope`` says
    ``all_versions``); ``segment`` is None for all predictions, else (tag key, value).
    """
    return {
        "alarm": {
            "id": alarm_id,
            "rule": rule,
            "state": state,
            "opened_at": rfc3339(opened_at),
            "resolved_at": rfc3339(resolved_at) if resolved_at else None,
            "summary": summary,
        },
        "model": model,
        "version": version,
        "scope": "all_versions" if version is None else "version",
        "segment": {"key": segment[0], "value": segment[1]} if segment else None,
        "evidence": evidence,
        "metrics_query": metrics_query,
    }


def ping_data(target_id: int, requested_at: datetime) -> dict[str, Any]:
    """``data`` of a ``ping``: a test event that proves the target receives and can verify."""
    return {
        "webhook": target_id,
        "requested_at": rfc3339(requested_at),
        "message": "Test event from Calibrant: the signature headers can be verified with your secret.",
    }
