"""Write a model's metrics or cases to a CSV or Parquet file.

Metrics are those ``GET /v1/models/{model}/metrics`` answers for the same range, granularity,
window, version and tag (the same function computes them), one row per period: an interval
``[low, high]`` becomes the columns ``<metric>_low`` and ``<metric>_high``, a nested object its
dotted sub-columns (``status.ece.state``). Cases are the stored predictions scored in the range
with their outcome, streamed from the database in batches so a year of cases never sits in memory.
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import orjson
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from calibrant.errors import invalid
from calibrant.models.service import require
from calibrant.rollup import metrics_service
from calibrant.store.case_export import CASE_COLUMNS, case_batches
from calibrant.store.unit import Session
from calibrant.vocabulary.instants import required_instant
from calibrant.vocabulary.segments import parse_tag

FORMATS = ("csv", "parquet")
CASE_BATCH = 50_000


def flatten(period: dict[str, Any]) -> dict[str, Any]:
    """One period of the metrics answer as flat columns (see the module docstring)."""
    flat: dict[str, Any] = {}

    def put(prefix: str, value: Any) -> None:
        if isinstance(value, dict):
            for key, inner in value.items():
                put(f"{prefix}.{key}", inner)
        elif prefix.endswith("_ci") and (value is None or len(value) == 2):
            flat[f"{prefix}_low"], flat[f"{prefix}_high"] = value or (None, None)
        elif isinstance(value, list | tuple):
            flat[prefix] = orjson.dumps(value).decode()
        else:
            flat[prefix] = value
    for key, value in period.items():
        put(key, value)
    return flat


def export_metrics(session: Session, model: str, out: Path, fmt: str, *, start: str | None, end: str | None,
                   granularity: str, window: str | None, version: str | None, tag: list[str],
                   now: datetime) -> int:
    """Write the periods' metrics; return how many periods were written."""
    answer = metrics_service.metrics(session, model, start=start, end=end, granularity=granularity,
                                     window=window, version=version, tag=tag, now=now)
    frame = pd.DataFrame([flatten(p) for p in answer["periods"]])
    if fmt == "csv":
        frame.to_csv(out, index=False)
    else:
        frame.to_parquet(out, index=False)
    return len(frame)


_CASE_SCHEMA = pa.schema([
    ("id", pa.string()), ("version", pa.string()), ("probability", pa.float64()),
    ("scored_at", pa.timestamp("us", tz="UTC")), ("tags", pa.string()), ("label", pa.int8()),
    ("observed_at", pa.timestamp("us", tz="UTC")), ("occurred_at", pa.timestamp("us", tz="UTC")),
])


def _utc(t: datetime | None) -> datetime | None:
    if t is None:
        return None
    return t.replace(tzinfo=UTC) if t.tzinfo is None else t.astimezone(UTC)


def _case_frames(session: Session, model: str, *, start: str | None, end: str | None,
                 version: str | None, tag: list[str]) -> Iterator[pd.DataFrame]:
    row = require(session, model)
    lo, hi = required_instant("start", start), required_instant("end", end)
    if hi <= lo:
        raise invalid("end", "must be after start")
    if len(tag) > 1:
        raise invalid("tag", "at most one tag filter")
    wanted = parse_tag("tag", tag[0]) if tag else None
    for rows in case_batches(session, row.id, start=lo, end=hi, version=version, tag=wanted,
                             batch=CASE_BATCH):
        frame = pd.DataFrame(rows, columns=list(CASE_COLUMNS))
        for column in ("scored_at", "observed_at", "occurred_at"):
            frame[column] = pd.to_datetime(frame[column].map(_utc), utc=True)
        frame["label"] = frame["label"].astype("Int8")
        yield frame


def export_cases(session: Session, model: str, out: Path, fmt: str, *, start: str | None, end: str | None,
                 version: str | None, tag: list[str]) -> int:
    """Write the cases scored in [start, end) (filtered like the metrics); return how many."""
    written = 0
    writer: pq.ParquetWriter | None = None
    try:
        for frame in _case_frames(session, model, start=start, end=end, version=version, tag=tag):
            if fmt == "csv":
                shown = frame.copy()
                for column in ("scored_at", "observed_at", "occurred_at"):
                    shown[column] = shown[column].dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
                shown.to_csv(out, index=False, mode="w" if written == 0 else "a", header=written == 0)
            else:
                if writer is None:
                    writer = pq.ParquetWriter(out, _CASE_SCHEMA)
                writer.write_table(pa.Table.from_pandas(frame, schema=_CASE_SCHEMA, preserve_index=False))
            written += len(frame)
    finally:
        if writer is not None:
            writer.close()
    if written == 0:  # still a file with the columns, so a reader of the export needs no special case
        empty = pd.DataFrame({c: pd.Series(dtype=object) for c in CASE_COLUMNS})
        if fmt == "csv":
            empty.to_csv(out, index=False)
        else:
            pq.write_table(pa.Table.from_pandas(empty, schema=_CASE_SCHEMA, preserve_index=False), out)
    return written
