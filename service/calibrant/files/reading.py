"""Read prediction and outcome files (CSV, Parquet) in chunks of ingest items.

The files are parsed by pandas (CSV) and pyarrow (Parquet), never by hand. Each chunk becomes the
same list of item dicts an HTTP body decodes to, so the ingest service checks file rows with the
checks it applies to requests. Values are handed on as found where they cannot be converted
(a probability of "high", a label of "maybe"): the ingest check then names the field and why.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import UTC
from pathlib import Path
from typing import Any, BinaryIO

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from calibrant.ingest.batch import DEFAULT_VERSION

TAG_PREFIX = "tag."
FIELDS = {
    "predictions": ("id", "probability", "scored_at", "version"),
    "outcomes": ("id", "label", "observed_at", "occurred_at"),
}
REQUIRED = {
    "predictions": ("id", "probability", "scored_at"),
    "outcomes": ("id", "label", "observed_at"),
}
TIME_FIELDS = ("scored_at", "observed_at", "occurred_at")
_NAIVE = re.compile(r"\d{4}-\d{2}-\d{2}[Tt ]\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?")
# The RFC 3339 texts parsed column-wise: a strict subset of what the ingest check accepts
# (vocabulary.instants), at most microseconds, so pandas and the check read them alike.
_FAST_RFC3339 = r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(?:\.\d{1,6})?(?:Z|[+-]\d{2}:\d{2})"
_LABELS = {"0": 0, "1": 1, "true": True, "false": False, "True": True, "False": False,
           "TRUE": True, "FALSE": False}


class FileProblem(ValueError):
    """The file as a whole cannot be imported (unknown format, a required column missing)."""


@dataclass(frozen=True, slots=True)
class Chunk:
    items: list[dict[str, Any]]
    lines: list[int]  # CSV: the line in the file (header is line 1); Parquet: the row, from 1


@dataclass(frozen=True, slots=True)
class Layout:
    """Which column holds which field, and the time zone of naive times."""

    kind: str
    columns: dict[str, str] = field(default_factory=dict)  # field -> column name in the file
    time_zone: str | None = None

    def column(self, name: str) -> str:
        return self.columns.get(name, name)


def file_format(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix in (".csv", ".txt") or path.name.lower().endswith(".csv.gz"):
        return "csv"
    if suffix in (".parquet", ".pq"):
        return "parquet"
    raise FileProblem(f"{path.name}: unknown format; name it .csv or .parquet")


def _wanted(layout: Layout, header: list[str]) -> dict[str, str]:
    """column name -> field name for the columns this import reads; checks the required ones."""
    by_column = {layout.column(f): f for f in FIELDS[layout.kind] if layout.column(f) in header}
    missing = [f"{f} (column {layout.column(f)!r})" for f in REQUIRED[layout.kind]
               if layout.column(f) not in header]
    if missing:
        raise FileProblem("required column(s) missing: " + ", ".join(missing))
    if layout.kind == "predictions":
        by_column.update({c: c for c in header if c.startswith(TAG_PREFIX)})
    return by_column


def csv_chunks(handle: BinaryIO, layout: Layout, rows: int) -> Iterator[Chunk]:
    """Chunks of a CSV read as text (every value a string; an empty cell is missing)."""
    header = list(pd.read_csv(handle, nrows=0).columns)
    handle.seek(0)
    wanted = _wanted(layout, header)
    reader = pd.read_csv(handle, chunksize=rows, dtype=str, keep_default_na=False, na_filter=False,
                         usecols=list(wanted))
    first = 0
    for frame in reader:
        lines = list(range(first + 2, first + 2 + len(frame)))
        first += len(frame)
        yield Chunk(_items(frame.rename(columns=wanted), layout), lines)


def parquet_rows(path: Path) -> int:
    return int(pq.ParquetFile(path).metadata.num_rows)


def parquet_chunks(path: Path, layout: Layout, rows: int) -> Iterator[Chunk]:
    """Chunks of a Parquet file, decoded ``rows`` at a time.

    A file written with one large row group (pandas' default) would otherwise cost the whole
    group in memory: the column chunks are read through a 1 MiB buffer instead of all at once,
    decoded on this thread only, and into memory from the system allocator, which gives freed
    pages back (pyarrow's default pool keeps them). Measured on the bench's 1M-row file, read in
    20,000-row batches: peak 180 MiB with the defaults, 154 MiB so (111 MiB of it the imports).
    """
    pa.set_memory_pool(pa.system_memory_pool())
    source = pq.ParquetFile(path, pre_buffer=False, buffer_size=1 << 20)
    wanted = _wanted(layout, list(source.schema_arrow.names))
    first = 0
    for batch in source.iter_batches(batch_size=rows, columns=list(wanted), use_threads=False):
        frame = batch.to_pandas().rename(columns=wanted)
        lines = list(range(first + 1, first + 1 + len(frame)))
        first += len(frame)
        yield Chunk(_items(frame, layout), lines)


def _missing(values: pd.Series) -> pd.Series:
    missing = values.isna()
    if values.dtype == object or pd.api.types.is_string_dtype(values):
        missing |= values.astype(str).eq("")
    return missing


def _as_objects(values: pd.Series) -> list[Any]:
    """Python values with every missing cell as None."""
    return values.astype(object).where(~_missing(values), None).tolist()


def _ids(values: pd.Series) -> list[Any]:
    """Ids are text; an integer id column of a Parquet file reads as its decimal digits."""
    if pd.api.types.is_integer_dtype(values):
        values = values.astype(str)
    return _as_objects(values)


def _numbers(values: pd.Series) -> list[Any]:
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        return _as_objects(values)
    parsed = pd.to_numeric(values, errors="coerce")
    # Unparseable text is passed on as it is, so the ingest check reports it as not a number.
    return parsed.astype(object).where(parsed.notna(), values.where(~_missing(values), None)).tolist()


def _labels(values: pd.Series) -> list[Any]:
    if pd.api.types.is_bool_dtype(values) or pd.api.types.is_integer_dtype(values):
        return _as_objects(values)
    return [_LABELS.get(v, v) if isinstance(v, str) else v for v in _as_objects(values)]


def _instants(values: pd.Series, time_zone: str | None) -> list[Any]:
    """Each time as an aware UTC ``datetime`` where the file gives one unambiguously, else as text.

    The ingest check takes an aware ``datetime`` as the instant it is (``vocabulary.instants``), so
    a file's times are parsed column-wise here instead of row by row there (a tenth of the import's
    time at a million rows). Only what the RFC 3339 check would accept is parsed here: timestamps
    with a zone, and texts of the plain ``…T…(Z|±hh:mm)`` form (``_FAST_RFC3339``). Everything else
    is handed on as text for the ingest check to parse or name: texts of other forms, and naive
    times without ``time_zone``. A naive time with ``time_zone`` takes that zone; one that does not
    exist or is ambiguous there (a daylight-saving change) is passed on naive and refused."""
    if pd.api.types.is_datetime64_any_dtype(values):
        stamps = values
        if getattr(stamps.dt, "tz", None) is None:
            if time_zone is None:
                return _as_objects(stamps.dt.strftime("%Y-%m-%dT%H:%M:%S.%f"))
            stamps = stamps.dt.tz_localize(time_zone, ambiguous="NaT", nonexistent="NaT")
        return _aware(stamps).tolist()
    texts = values.astype(object).where(~_missing(values), None)
    if time_zone is not None:
        naive = texts.astype(str).str.fullmatch(_NAIVE.pattern) & texts.notna()
        if naive.any():
            local = pd.to_datetime(texts[naive], format="ISO8601", errors="coerce")
            local = local.dt.tz_localize(time_zone, ambiguous="NaT", nonexistent="NaT")
            shown = local.dt.tz_convert("UTC").dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
            texts = texts.copy()
            texts[naive] = shown.where(local.notna(), texts[naive])
    out = texts.to_numpy(dtype=object, copy=True)
    plain = texts.astype(str).str.fullmatch(_FAST_RFC3339).to_numpy(dtype=bool) & texts.notna().to_numpy()
    if plain.any():
        parsed = pd.to_datetime(pd.Series(out[plain]), format="ISO8601", utc=True, errors="coerce")
        ok = parsed.notna().to_numpy()
        # A text pandas cannot read (30 February) stays text: the ingest check names it.
        chosen = out[plain]
        chosen[ok] = _aware(parsed[ok])
        out[plain] = chosen
    return out.tolist()


def _aware(stamps: pd.Series) -> np.ndarray:
    """Zoned timestamps as ``datetime`` objects in UTC (``datetime.UTC``, microseconds); a
    missing one is None. Converted through naive UTC microseconds, since numpy makes those
    objects in C, and ``datetime.UTC`` is the zone the ingest check takes without converting."""
    micros = stamps.dt.tz_convert("UTC").dt.tz_localize(None).to_numpy(dtype="datetime64[us]")
    out = np.full(len(micros), None, dtype=object)
    present = ~np.isnat(micros)
    out[present] = [d.replace(tzinfo=UTC) for d in micros[present].astype(object)]
    return out


def _items(frame: pd.DataFrame, layout: Layout) -> list[dict[str, Any]]:
    n = len(frame)
    ids = _ids(frame["id"])
    if layout.kind == "predictions":
        probabilities = _numbers(frame["probability"])
        scored = _instants(frame["scored_at"], layout.time_zone)
        versions = (_as_objects(frame["version"]) if "version" in frame else [None] * n)
        tags = _tags(frame)
        return [
            {"id": i, "probability": p, "scored_at": t, "version": DEFAULT_VERSION if v is None else v,
             "tags": g}
            for i, p, t, v, g in zip(ids, probabilities, scored, versions, tags, strict=True)
        ]
    labels = _labels(frame["label"])
    observed = _instants(frame["observed_at"], layout.time_zone)
    occurred = (_instants(frame["occurred_at"], layout.time_zone) if "occurred_at" in frame
                else [None] * n)
    return [
        {"id": i, "label": y, "observed_at": t, "occurred_at": o}
        for i, y, t, o in zip(ids, labels, observed, occurred, strict=True)
    ]


def _tags(frame: pd.DataFrame) -> list[dict[str, Any] | None]:
    """``tag.<key>`` columns into tag maps; an empty cell is a tag not set on that row."""
    columns = [c for c in frame.columns if c.startswith(TAG_PREFIX)]
    if not columns:
        return [None] * len(frame)
    keys = [c[len(TAG_PREFIX):] for c in columns]
    values = [_as_objects(frame[c].astype(object).where(frame[c].notna(), None)) for c in columns]
    return [
        {k: v for k, v in zip(keys, row, strict=True) if v is not None} or None
        for row in zip(*values, strict=True)
    ]
