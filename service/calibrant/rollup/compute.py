"""Raw rows of one bucket → the summaries of "all" and of every declared segment value.

Segments (docs/architecture.md, data semantics): a model declares up to 4 tag keys; each key keeps summaries
for its first 50 distinct values, in order of first sight, and pools the rest
under "other". A row without a declared key's tag is in no segment of that key
(it still counts in "all").
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np
import orjson

from calibrant.stats.summary import Summary
from calibrant.store.rollup_repo import RawChunk
from calibrant.store.rollup_tables import MAX_SEGMENT_VALUES, OTHER_VALUE
from calibrant.vocabulary.segments import ALL_SEGMENT

SegmentId = tuple[str, str]


@dataclass
class SegmentBook:
    """The values each declared key tracks; new values are admitted until the cap."""

    keys: list[str]
    known: dict[str, list[str]]
    admitted: dict[str, list[str]] = field(default_factory=dict)

    def resolve(self, key: str, value: str) -> str:
        values = self.known.setdefault(key, [])
        if value in values:
            return value
        if len(values) < MAX_SEGMENT_VALUES and value != OTHER_VALUE:
            values.append(value)
            self.admitted.setdefault(key, []).append(value)
            return value
        return OTHER_VALUE


def summarise_bucket(chunks: Iterable[RawChunk], book: SegmentBook) -> tuple[dict[SegmentId, Summary], int]:
    """Summaries per segment of one bucket's rows, and the number of rows read."""
    parts: dict[SegmentId, list[Summary]] = {}
    n_rows = 0
    for chunk in chunks:
        n_rows += chunk.probability.size
        parts.setdefault((ALL_SEGMENT, ALL_SEGMENT), []).append(
            Summary.from_arrays(chunk.probability, chunk.label)
        )
        if not book.keys:
            continue
        parsed = [orjson.loads(t) if t else {} for t in chunk.tags]
        for key in book.keys:
            values = np.array([tags.get(key, "") for tags in parsed], dtype=object)
            for value in dict.fromkeys(values.tolist()):
                if value == "":
                    continue
                rows = values == value
                segment = (key, book.resolve(key, value))
                parts.setdefault(segment, []).append(
                    Summary.from_arrays(chunk.probability[rows], chunk.label[rows])
                )
    return {seg: Summary.merge_many(group) for seg, group in parts.items()}, n_rows
