"""A small HTTP client for production systems that post to Calibrant.

    from calibrant_client import Client
    calibrant = Client("http://127.0.0.1:8000", api_key="cal_...")
    calibrant.send_predictions("late-delivery", [{"id": "order-1", "probability": 0.2, "scored_at": now}])

Ingest is idempotent on the server (the same item again is a duplicate, never a
second row), so a batch whose answer was lost may be sent again safely: the
client retries connection failures, timeouts, 429 and 502/503/504 with bounded
exponential backoff, honouring ``Retry-After``. Other 4xx answers are not
retried; they raise ``CalibrantRequestError`` carrying the server's RFC 9457
problem document. Datetimes are sent as RFC 3339 with their offset; a naive
datetime is refused here, before anything is sent, as the server would refuse it.

``refresh()`` starts a refresh job on the server (or joins the one running) and
polls it until it ends, reporting its progress to a callback; a server too busy to
answer a poll (503 with Retry-After) is waited for, up to the caller's timeout.
"""

from __future__ import annotations

import email.utils
import time
from collections.abc import Callable, Iterable, Mapping
from datetime import datetime
from typing import Any, cast

import httpx

from calibrant_client.results import OutcomeCounts, PredictionCounts

MAX_BATCH_ITEMS = 10_000  # the server's default CALIBRANT_MAX_BATCH_ITEMS
RETRY_STATUSES = frozenset({429, 502, 503, 504})
# Transport failures after which the request may or may not have reached the server;
# resending is safe only because ingest is idempotent.
RETRY_EXCEPTIONS = (httpx.TimeoutException, httpx.ConnectError, httpx.RemoteProtocolError, httpx.ReadError)


class CalibrantError(Exception):
    """Base of every error this client raises."""


class CalibrantRequestError(CalibrantError):
    """The server refused the request (4xx); ``problem`` is its RFC 9457 document."""

    def __init__(self, status: int, problem: dict[str, Any]):
        self.status = status
        self.problem = problem
        self.errors: list[dict[str, Any]] = list(problem.get("errors") or [])
        self.title = str(problem.get("title") or f"HTTP {status}")
        self.detail = str(problem.get("detail") or "")
        shown = "; ".join(f"item {e.get('index')}: {e.get('field')}: {e.get('message')}"
                          for e in self.errors[:5])
        super().__init__(f"{status} {self.title}: {self.detail}" + (f" ({shown})" if shown else ""))


class CalibrantJobError(CalibrantError):
    """A refresh job ended without succeeding (failed, or abandoned by a server that stopped), or
    did not end within the caller's timeout; ``job`` is the job as last seen."""

    def __init__(self, message: str, job: dict[str, Any]):
        self.job = job
        super().__init__(message)


class CalibrantUnavailableError(CalibrantError):
    """Retries exhausted (or a 5xx that is not transient); ``status`` is None for transport failures."""

    def __init__(self, message: str, *, status: int | None, attempts: int):
        self.status = status
        self.attempts = attempts
        super().__init__(message)


def rfc3339(value: datetime) -> str:
    """RFC 3339 with the value's own offset; naive datetimes are ambiguous and refused."""
    if value.tzinfo is None or value.utcoffset() is None:
        raise ValueError(f"naive datetime {value.isoformat()} refused: give it a timezone (e.g. UTC)")
    return value.isoformat()


def encode_item(item: Mapping[str, Any]) -> dict[str, Any]:
    """A JSON-ready copy of one prediction or outcome: datetimes to RFC 3339, numpy scalars to Python."""
    out: dict[str, Any] = {}
    for key, value in item.items():
        if isinstance(value, datetime):
            out[key] = rfc3339(value)
        elif hasattr(value, "item") and not isinstance(value, str | bytes):  # numpy scalar
            out[key] = value.item()
        else:
            out[key] = value
    return out


def retry_after_seconds(value: str | None, now: float) -> float | None:
    """``Retry-After`` as seconds to wait: delta-seconds or an HTTP date (RFC 9110 10.2.3)."""
    if not value:
        return None
    value = value.strip()
    if value.isdigit():
        return float(value)
    try:
        when = email.utils.parsedate_to_datetime(value)
    except (TypeError, ValueError):
        return None
    if when.tzinfo is None:
        return None
    return max(when.timestamp() - now, 0.0)


def _problem(response: httpx.Response) -> dict[str, Any]:
    try:
        doc = response.json()
    except ValueError:
        doc = None
    if isinstance(doc, dict):
        return doc
    return {"status": response.status_code, "title": response.reason_phrase, "detail": response.text[:500]}


class Client:
    """One connection pool to a Calibrant server. Thread-safe as ``httpx.Client`` is."""

    def __init__(self, base_url: str, api_key: str | None = None, *, timeout: float = 30.0,
                 transport: httpx.BaseTransport | None = None, batch_size: int = MAX_BATCH_ITEMS,
                 max_retries: int = 5, backoff_base: float = 0.5, backoff_max: float = 30.0,
                 max_retry_after: float = 120.0, sleep: Callable[[float], None] = time.sleep,
                 wall_clock: Callable[[], float] = time.time):
        if not 1 <= batch_size <= MAX_BATCH_ITEMS:
            raise ValueError(f"batch_size must be between 1 and {MAX_BATCH_ITEMS}")
        headers = {"Authorization": f"Bearer {api_key}"} if api_key else {}
        self._http = httpx.Client(base_url=base_url.rstrip("/"), headers=headers, timeout=timeout,
                                  transport=transport)
        self.batch_size = batch_size
        self.max_retries = max_retries
        self.backoff_base = backoff_base
        self.backoff_max = backoff_max
        self.max_retry_after = max_retry_after
        self._sleep = sleep
        self._wall_clock = wall_clock

    # ------------------------------------------------------------------ lifecycle
    def close(self) -> None:
        self._http.close()

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------------ ingest
    def send_predictions(self, model: str, items: Iterable[Mapping[str, Any]]) -> PredictionCounts:
        """Post predictions in batches; returns the summed counts (accepted, duplicates).

        Batches are independent transactions: if one fails, the ones before it are stored
        and the exception says which item offset the failing batch started at.
        """
        return cast(PredictionCounts, self._ingest(model, "predictions", items))

    def send_outcomes(self, model: str, items: Iterable[Mapping[str, Any]]) -> OutcomeCounts:
        """Post outcomes in batches; returns the summed counts (accepted, duplicates, corrected)."""
        return cast(OutcomeCounts, self._ingest(model, "outcomes", items))

    def _ingest(self, model: str, kind: str, items: Iterable[Mapping[str, Any]]) -> dict[str, int]:
        encoded = [encode_item(item) for item in items]  # refuse naive times before sending any batch
        # Every count the typed answer names starts at 0, so an empty send still answers in full.
        answer_type = PredictionCounts if kind == "predictions" else OutcomeCounts
        totals: dict[str, int] = dict.fromkeys(sorted(answer_type.__required_keys__), 0)
        for offset in range(0, len(encoded), self.batch_size):
            batch = encoded[offset:offset + self.batch_size]
            try:
                answer = self.request("POST", f"/v1/models/{model}/{kind}", json={kind: batch}, retry=True)
            except CalibrantError as exc:
                exc.add_note(f"batch of {len(batch)} {kind} starting at item {offset}; "
                             f"{offset} item(s) before it were stored")
                raise
            for key, value in answer.items():
                if isinstance(value, int):
                    totals[key] = totals.get(key, 0) + value
        return totals

    # ------------------------------------------------------------------ reading
    def metrics(self, model: str, start: datetime, end: datetime, *, granularity: str = "week",
                window: str | None = None, version: str | None = None,
                tag: str | list[str] | None = None) -> dict[str, Any]:
        """``GET /v1/models/{model}/metrics`` over [start, end); ``tag`` is ``key:value``."""
        params: dict[str, Any] = {"start": rfc3339(start), "end": rfc3339(end), "granularity": granularity}
        if window is not None:
            params["window"] = window
        if version is not None:
            params["version"] = version
        if tag is not None:
            params["tag"] = [tag] if isinstance(tag, str) else list(tag)
        return self.request("GET", f"/v1/models/{model}/metrics", params=params)

    # ------------------------------------------------------------------ jobs
    def refresh(self, *, wait: bool = True, timeout: float = 3600.0, poll_seconds: float = 1.0,
                on_progress: Callable[[dict[str, Any]], None] | None = None) -> dict[str, Any]:
        """Start a refresh job (POST /v1/refresh) or join the running one; return the job.

        With ``wait`` (the default), poll GET /v1/refresh-jobs/{id} every ``poll_seconds`` until
        it ends, calling ``on_progress`` with each state seen, and return the ended job. A poll the
        server cannot answer now is retried until ``timeout`` seconds (wall time) have passed.
        Raises ``CalibrantJobError`` if the job failed, was abandoned, or outlived ``timeout``.
        """
        deadline = self._wall_clock() + timeout
        # Sending it again is harmless: a second POST meets the running job or refreshes afresh.
        job = self.request("POST", "/v1/refresh", retry=True)
        if on_progress is not None:
            on_progress(job)
        while wait and job["state"] == "running":
            if self._wall_clock() >= deadline:
                raise CalibrantJobError(
                    f"refresh job {job['id']} still running after {timeout:g} s; it goes on in the "
                    f"server (GET /v1/refresh-jobs/{job['id']})", job)
            self._sleep(poll_seconds)
            try:
                job = self.request("GET", f"/v1/refresh-jobs/{job['id']}")
            except CalibrantUnavailableError:
                continue  # the server is busy or restarting: keep polling until the deadline
            if on_progress is not None:
                on_progress(job)
        if job["state"] in {"failed", "abandoned"}:
            shown = "; ".join(job.get("errors") or []) or "no reason recorded"
            raise CalibrantJobError(f"refresh job {job['id']} {job['state']}: {shown}", job)
        return job

    # ------------------------------------------------------------------ any endpoint
    def request(self, method: str, path: str, *, json: Any = None, params: Mapping[str, Any] | None = None,
                retry: bool | None = None) -> Any:
        """Send one request and return its JSON (None for 204).

        ``retry`` defaults to True for GET/PUT/DELETE, which are idempotent, and False for
        other POSTs; ingest passes True because the server makes it idempotent.
        """
        if retry is None:
            retry = method.upper() in {"GET", "PUT", "DELETE", "HEAD"}
        attempts = 1 + (self.max_retries if retry else 0)
        for attempt in range(1, attempts + 1):
            wait = self._backoff(attempt)
            try:
                response = self._http.request(method, path, json=json, params=params)
            except RETRY_EXCEPTIONS as exc:
                if attempt == attempts:
                    raise CalibrantUnavailableError(
                        f"{method} {path}: {type(exc).__name__} after {attempt} attempt(s): {exc}",
                        status=None, attempts=attempt) from exc
                self._sleep(wait)
                continue
            if response.status_code in RETRY_STATUSES and attempt < attempts:
                asked = retry_after_seconds(response.headers.get("retry-after"), self._wall_clock())
                if asked is not None and asked > self.max_retry_after:
                    raise CalibrantUnavailableError(
                        f"{method} {path}: {response.status_code}, server asks to wait {asked:.0f} s "
                        f"(more than max_retry_after = {self.max_retry_after:g} s)",
                        status=response.status_code, attempts=attempt)
                self._sleep(max(wait, asked or 0.0))
                continue
            return self._answer(method, path, response, attempt)
        raise AssertionError("unreachable: the last attempt returns or raises")

    def _backoff(self, attempt: int) -> float:
        return min(self.backoff_max, self.backoff_base * 2 ** (attempt - 1))

    @staticmethod
    def _answer(method: str, path: str, response: httpx.Response, attempt: int) -> Any:
        status = response.status_code
        if 200 <= status < 300:
            return None if status == 204 or not response.content else response.json()
        if 400 <= status < 500:
            raise CalibrantRequestError(status, _problem(response))
        problem = _problem(response)
        raise CalibrantUnavailableError(
            f"{method} {path}: {status} {problem.get('title', '')}: {problem.get('detail', '')} "
            f"after {attempt} attempt(s)", status=status, attempts=attempt)
