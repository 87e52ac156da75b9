"""Set-based recomputation of claimed hourly buckets: one model's buckets read and summarised together.

The claimed buckets of a model are cut, in (hour, version) order, into chunks
of about ``chunk_rows`` rows (estimated from the rows per bucket of the chunks
read so far, so memory stays bounded). Each chunk is one query
(``store.bulk_rows``) and one vectorised group-by (``stats.summary_grouped``)
over (bucket, stream), where the streams are "all" and one per segment value
(``rollup.compute``: first 50 values of a key in order of first sight, the
rest pooled under "other"; a row without the key's tag is in none of its
segments). Rows are visited in (hour, version) order, so values are admitted in
the order the per-bucket path would meet them bucket by bucket.

Each distinct tag string is decoded once per model and refresh.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import timedelta

import numpy as np
import orjson

from calibrant.rollup.compute import SegmentBook, SegmentId
from calibrant.stats.summary import Summary
from calibrant.stats.summary_grouped import grouped_summaries
from calibrant.store import rollup_repo
from calibrant.store.bulk_rows import RangeRows, Span, hours_since_epoch, range_rows
from calibrant.store.bulk_stream import stream_range_rows
from calibrant.store.dirty import BucketKey, Claim
from calibrant.store.unit import Engine
from calibrant.vocabulary.segments import ALL_SEGMENT

STREAM_MAX_SPANS = 32  # runs of hours up to which a claim is read as one ordered stream
FIRST_CHUNK_BUCKETS = 64  # before any bucket has been read, its size is unknown
MAX_CHUNK_BUCKETS = 2000  # bounds the statement's list of spans
HOUR = timedelta(hours=1)


@dataclass(frozen=True, slots=True)
class BucketResult:
    claim: Claim[BucketKey]
    summaries: dict[SegmentId, Summary]
    n_rows: int


@dataclass
class _TagDecoder:
    """Per declared key: the value of each distinct tag string, decoded once, as a value code."""

    keys: list[str]
    values: dict[str, list[str]] = field(default_factory=dict)  # key → values by code
    _codes: dict[str, dict[str, int]] = field(default_factory=dict)
    _by_text: dict[str, tuple[int, ...]] = field(default_factory=dict)

    def codes(self, texts: list[str]) -> np.ndarray:
        """(len(texts), len(keys)) value codes; −1 where the key is absent or empty."""
        out = np.empty((len(texts), len(self.keys)), np.int64)
        for i, text in enumerate(texts):
            row = self._by_text.get(text)
            if row is None:
                row = self._by_text[text] = self._decode(text)
            out[i] = row
        return out

    def _decode(self, text: str) -> tuple[int, ...]:
        tags = orjson.loads(text) if text else {}
        row = []
        for key in self.keys:
            value = tags.get(key, "")
            if value == "":
                row.append(-1)
                continue
            codes = self._codes.setdefault(key, {})
            code = codes.get(value)
            if code is None:
                code = codes[value] = len(codes)
                self.values.setdefault(key, []).append(value)
            row.append(code)
        return tuple(row)


def summarised(engine: Engine, model_id: int, claims: list[Claim[BucketKey]],
               chunk_rows: int) -> Iterator[tuple[SegmentBook, list[BucketResult]]]:
    """The claimed buckets of one model, summarised chunk by chunk, with the model's segment book."""
    with engine.begin() as conn:
        book = SegmentBook(rollup_repo.segment_keys(conn, model_id),
                           rollup_repo.segment_values(conn, model_id))
        horizon = rollup_repo.horizon_days(conn, model_id)
    decoder = _TagDecoder(list(book.keys))
    pending = sorted(claims, key=lambda c: (c.key.hour, c.key.version))
    spans = _spans(pending)
    if engine.dialect.name == "postgresql" and len(spans) <= STREAM_MAX_SPANS:
        yield from _streamed(engine, model_id, pending, spans, horizon, book, decoder, chunk_rows)
        return
    rows_read = buckets_read = 0
    tags: list[str] | None = None
    i = 0
    while i < len(pending):
        if buckets_read:
            per_bucket = max(1.0, rows_read / buckets_read)
            n = int(min(MAX_CHUNK_BUCKETS, max(1, chunk_rows // per_bucket)))
        else:
            n = FIRST_CHUNK_BUCKETS
        part = pending[i:i + n]
        i += len(part)
        rows = range_rows(engine, model_id, _spans(part), horizon, with_tags=bool(book.keys), known_tags=tags)
        tags = rows.tag_texts
        rows_read += rows.size
        buckets_read += len(part)
        yield book, summarise_rows(rows, part, book, decoder)


def _streamed(engine: Engine, model_id: int, pending: list[Claim[BucketKey]], spans: list[Span],
              horizon: int | None, book: SegmentBook, decoder: _TagDecoder,
              chunk_rows: int) -> Iterator[tuple[SegmentBook, list[BucketResult]]]:
    """A claim of few long runs of hours (a full refresh): one ordered stream, cut between buckets."""
    versions = sorted({c.key.version for c in pending})
    order = [(hours_since_epoch(c.key.hour), versions.index(c.key.version)) for c in pending]
    done = 0
    for rows in stream_range_rows(engine, model_id, spans, horizon, bool(book.keys), chunk_rows):
        last = (int(rows.hour[-1]), int(rows.version_code[-1]))
        upto = done
        while upto < len(pending) and order[upto] <= last:
            upto += 1
        yield book, summarise_rows(rows, pending[done:upto], book, decoder)
        done = upto
    if done < len(pending):  # claimed buckets with no rows left: their summaries go
        empty = RangeRows(versions, np.empty(0, np.int16), np.empty(0, np.int64), np.empty(0),
                          np.empty(0, np.int8), np.empty(0, np.int64), [""])
        yield book, summarise_rows(empty, pending[done:], book, decoder)


def _spans(claims: list[Claim[BucketKey]]) -> list[Span]:
    """Runs of consecutive claimed hours per version."""
    spans: list[Span] = []
    for c in sorted(claims, key=lambda c: (c.key.version, c.key.hour)):
        last = spans[-1] if spans else None
        if last is not None and last.version == c.key.version and last.end == c.key.hour:
            spans[-1] = Span(last.version, last.start, c.key.hour + HOUR)
        else:
            spans.append(Span(c.key.version, c.key.hour, c.key.hour + HOUR))
    return spans


def summarise_rows(rows: RangeRows, claims: list[Claim[BucketKey]], book: SegmentBook,
                   decoder: _TagDecoder) -> list[BucketResult]:
    """Every claimed bucket's summaries per segment from the rows of its range (one group-by)."""
    n_versions = max(1, len(rows.versions))
    version_index = {v: i for i, v in enumerate(rows.versions)}
    claimed = sorted(claims, key=lambda c: (c.key.hour, c.key.version))
    bucket_codes = np.array(
        [hours_since_epoch(c.key.hour) * n_versions + version_index.get(c.key.version, 0) for c in claimed],
        dtype=np.int64)
    if not rows.size:
        return [BucketResult(c, {}, 0) for c in claimed]
    row_codes = rows.hour * n_versions + rows.version_code
    bucket = np.searchsorted(bucket_codes, row_codes)
    found = bucket_codes[np.minimum(bucket, bucket_codes.size - 1)]
    if np.any(bucket >= bucket_codes.size) or np.any(found != row_codes):
        raise RuntimeError("a row outside the claimed buckets was read")
    order = np.argsort(bucket, kind="stable")  # (hour, version) order, rows of a bucket as read
    bucket = bucket[order]
    p = rows.probability[order]
    y = rows.label[order]
    n = p.size

    streams: dict[SegmentId, int] = {(ALL_SEGMENT, ALL_SEGMENT): 0}
    member_rows = [np.arange(n, dtype=np.int64)]
    member_streams = [np.zeros(n, np.int64)]
    if book.keys:
        value_codes = decoder.codes(rows.tag_texts)[rows.tag_code[order]]
        for j, key in enumerate(book.keys):
            row_value = value_codes[:, j]
            present = np.flatnonzero(row_value >= 0)
            if not present.size:
                continue
            seen, first = np.unique(row_value[present], return_index=True)
            stream_of_value = np.full(int(seen.max()) + 1, -1, np.int64)
            for code in seen[np.argsort(first)]:  # in order of first sight
                segment = (key, book.resolve(key, decoder.values[key][code]))
                stream_of_value[code] = streams.setdefault(segment, len(streams))
            member_rows.append(present)
            member_streams.append(stream_of_value[row_value[present]])
    n_streams = len(streams)
    all_rows = np.concatenate(member_rows)
    groups = bucket[all_rows] * n_streams + np.concatenate(member_streams)
    group_ids, summaries = grouped_summaries(p, y, all_rows, groups)

    segment_of_stream = [seg for seg, _ in sorted(streams.items(), key=lambda item: item[1])]
    per_bucket: list[dict[SegmentId, Summary]] = [{} for _ in claimed]
    for g, s in zip(group_ids.tolist(), summaries, strict=True):
        per_bucket[g // n_streams][segment_of_stream[g % n_streams]] = s
    counts = np.bincount(bucket, minlength=len(claimed))
    return [BucketResult(c, per_bucket[i], int(counts[i])) for i, c in enumerate(claimed)]
