"""A file's times are parsed column-wise, and the ingest check then reads each exactly as it reads
the same text in an HTTP body; the next chunk is read on a thread while the current one is stored."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from datetime import UTC, datetime
from zoneinfo import ZoneInfo

import pandas as pd
import pytest

from calibrant.files.prefetch import read_ahead
from calibrant.files.reading import _instants
from calibrant.vocabulary.instants import parse_instant

TEXTS = [
    "2026-03-01T12:00:00Z",
    "2026-03-01T12:00:00.123456Z",
    "2026-03-01T12:00:00.5+02:00",
    "2026-03-01T00:30:00-05:30",
    "2026-03-01t12:00:00z",  # lower case: left to the check, which accepts it
    "2026-03-01 12:00:00Z",  # a space: the same
    "2026-03-01T12:00:00.123456789Z",  # nanoseconds: the same
    "2026-02-30T12:00:00Z",  # no such day
    "2026-03-01T12:00:00",  # naive
    "2026-03-01",
    "yesterday",
    "",
]


def test_each_text_reads_as_the_ingest_check_reads_it_in_a_body() -> None:
    handed_on = _instants(pd.Series(TEXTS, dtype=str), None)
    for text, value in zip(TEXTS, handed_on, strict=True):
        expected = parse_instant(text) if text else parse_instant(None)
        assert parse_instant(value) == expected, text
    assert isinstance(handed_on[0], datetime)  # parsed column-wise, not left to the row loop
    assert handed_on[0] == datetime(2026, 3, 1, 12, tzinfo=UTC)


def test_zoned_and_naive_timestamps_of_a_parquet_column() -> None:
    lisbon = ZoneInfo("Europe/Lisbon")
    # The second time does not exist in Lisbon (clocks went from 01:00 to 02:00).
    naive = pd.Series(pd.to_datetime(["2026-07-01 09:15:00", "2026-03-29 01:30:00"]))
    local = _instants(naive, "Europe/Lisbon")
    assert local[0] == datetime(2026, 7, 1, 9, 15, tzinfo=lisbon).astimezone(UTC)
    assert isinstance(parse_instant(local[1]), str)  # refused, as the text path refuses it
    zoned = _instants(naive.dt.tz_localize("UTC"), None)
    assert zoned[0] == datetime(2026, 7, 1, 9, 15, tzinfo=UTC)
    refusal = "has no UTC offset; add Z or +hh:mm (naive times are ambiguous)"
    assert parse_instant(_instants(naive, None)[0]) == refusal


def test_read_ahead_keeps_order_raises_where_the_source_failed_and_stops_when_left() -> None:
    assert list(read_ahead(iter(range(5)))) == [0, 1, 2, 3, 4]

    def failing() -> Iterator[int]:
        yield 1
        raise ValueError("line 7: broken quote")

    reader = read_ahead(failing())
    assert next(reader) == 1
    with pytest.raises(ValueError, match="broken quote"):
        next(reader)

    produced = []

    def endless() -> Iterator[int]:
        n = 0
        while True:
            produced.append(n)
            yield n
            n += 1

    reader = read_ahead(endless())
    assert next(reader) == 0
    reader.close()  # the consumer stops early: the thread ends too
    assert not any(t.name == "calibrant-read-ahead" for t in threading.enumerate())
    assert len(produced) <= 3  # one item handed over, at most one waiting, one being put
